package main

import (
	"fmt"
	"io"
	"os"
	"strings"
	"sync"
	"time"
)

// progress draws a progress bar on stderr when stderr is a terminal, and
// nothing otherwise, so pipeline logs stay clean.
type progress struct {
	mu      sync.Mutex
	w       io.Writer
	label   string
	on      bool
	last    time.Time
	started time.Time
	drawn   bool
}

func newProgress(w io.Writer, quiet bool, label string) *progress {
	p := &progress{w: w, label: label, started: time.Now()}
	if f, ok := w.(*os.File); ok && !quiet {
		if st, err := f.Stat(); err == nil && st.Mode()&os.ModeCharDevice != 0 {
			p.on = true
		}
	}
	return p
}

// update is a gamma.Options.Progress callback.
func (p *progress) update(done, total int) {
	if !p.on || total == 0 {
		return
	}
	p.mu.Lock()
	defer p.mu.Unlock()
	now := time.Now()
	if done < total && now.Sub(p.last) < 100*time.Millisecond {
		return
	}
	p.last = now
	const width = 40
	filled := width * done / total
	fmt.Fprintf(p.w, "\r%s [%s%s] %3d%% %s", p.label, strings.Repeat("#", filled), strings.Repeat(".", width-filled),
		100*done/total, now.Sub(p.started).Round(100*time.Millisecond))
	p.drawn = true
}

// done ends the bar's line.
func (p *progress) done() {
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.drawn {
		fmt.Fprintln(p.w)
	}
}
