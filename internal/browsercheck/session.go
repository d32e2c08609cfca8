package browsercheck

import (
	"bufio"
	"context"
	"encoding/base64"
	"encoding/json"
	"errors"
	"fmt"
	"net/url"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"time"
)

// Session is a headless Chromium that a test drives as a reader would:
// it opens a page, presses keys, clicks, reads what the page's scripts
// did and takes screenshots. It speaks the Chrome DevTools Protocol over
// the pipe Chromium opens with --remote-debugging-pipe (file descriptors 3
// and 4, one JSON message per NUL-terminated frame), so no port is opened
// and nothing but the browser is needed.
//
// Every console message, uncaught exception, content security policy
// report and network request of the page is recorded: see
// [Session.Problems].
type Session struct {
	opt      Options
	cmd      *exec.Cmd
	cancel   context.CancelFunc
	toChrome *os.File
	profile  string
	session  string
	pageURL  string

	mu       sync.Mutex
	nextID   int
	pending  map[int]chan cdpReply
	console  []string
	requests []string
	loaded   chan struct{}
	done     chan struct{}
	readErr  error
}

type cdpReply struct {
	Result json.RawMessage `json:"result"`
	Error  *struct {
		Code    int    `json:"code"`
		Message string `json:"message"`
	} `json:"error"`
}

type cdpMessage struct {
	ID        int             `json:"id"`
	Method    string          `json:"method"`
	Params    json.RawMessage `json:"params"`
	SessionID string          `json:"sessionId"`
	cdpReply
}

// Open starts a headless Chromium, opens the HTML file at htmlPath in a
// window of opt's size and waits for the page's load event. Close it when
// done.
func Open(htmlPath string, opt Options) (*Session, error) {
	if err := opt.fillDefaults(); err != nil {
		return nil, err
	}
	abs, err := filepath.Abs(htmlPath)
	if err != nil {
		return nil, fmt.Errorf("browsercheck: %s: %w", htmlPath, err)
	}
	profile, err := os.MkdirTemp("", "browsercheck-session-")
	if err != nil {
		return nil, fmt.Errorf("browsercheck: %w", err)
	}
	s := &Session{opt: opt, profile: profile, pending: map[int]chan cdpReply{},
		loaded: make(chan struct{}, 1), done: make(chan struct{}),
		pageURL: (&url.URL{Scheme: "file", Path: abs}).String()}
	if err := s.start(); err != nil {
		s.Close()
		return nil, err
	}
	if err := s.openPage(); err != nil {
		s.Close()
		return nil, err
	}
	return s, nil
}

func (s *Session) start() error {
	// Chromium reads commands from its fd 3 and writes replies to its fd 4.
	cmdR, cmdW, err := os.Pipe()
	if err != nil {
		return fmt.Errorf("browsercheck: %w", err)
	}
	repR, repW, err := os.Pipe()
	if err != nil {
		cmdR.Close()
		cmdW.Close()
		return fmt.Errorf("browsercheck: %w", err)
	}
	args := []string{
		"--headless", "--no-sandbox", "--disable-gpu", "--remote-debugging-pipe",
		"--disable-background-networking", "--disable-component-update", "--disable-sync",
		"--disable-extensions", "--no-first-run", "--no-default-browser-check",
		"--host-resolver-rules=MAP * ~NOTFOUND",
		"--user-data-dir=" + s.profile,
		"--window-size=" + strconv.Itoa(s.opt.Width) + "," + strconv.Itoa(s.opt.Height),
		"--hide-scrollbars", "about:blank",
	}
	ctx, cancel := context.WithCancel(context.Background())
	s.cancel = cancel
	s.cmd = exec.CommandContext(ctx, s.opt.Chromium, args...)
	ownGroup(s.cmd)
	s.cmd.ExtraFiles = []*os.File{cmdR, repW}
	s.cmd.WaitDelay = 10 * time.Second
	if err := s.cmd.Start(); err != nil {
		cmdR.Close()
		cmdW.Close()
		repR.Close()
		repW.Close()
		return fmt.Errorf("browsercheck: starting %s: %w", s.opt.Chromium, err)
	}
	cmdR.Close()
	repW.Close()
	s.toChrome = cmdW
	go s.read(repR)
	return nil
}

// read dispatches the browser's messages: replies to their callers,
// events to the recorders.
func (s *Session) read(r *os.File) {
	defer close(s.done)
	defer r.Close()
	br := bufio.NewReaderSize(r, 1<<20)
	for {
		frame, err := br.ReadBytes(0)
		if err != nil {
			s.mu.Lock()
			s.readErr = err
			for id, ch := range s.pending {
				close(ch)
				delete(s.pending, id)
			}
			s.mu.Unlock()
			return
		}
		var m cdpMessage
		if json.Unmarshal(frame[:len(frame)-1], &m) != nil {
			continue
		}
		if m.ID != 0 {
			s.mu.Lock()
			ch := s.pending[m.ID]
			delete(s.pending, m.ID)
			s.mu.Unlock()
			if ch != nil {
				ch <- m.cdpReply
			}
			continue
		}
		s.event(m.Method, m.Params)
	}
}

func (s *Session) event(method string, params json.RawMessage) {
	switch method {
	case "Page.loadEventFired":
		select {
		case s.loaded <- struct{}{}:
		default:
		}
	case "Runtime.consoleAPICalled":
		var p struct {
			Type string `json:"type"`
			Args []struct {
				Value       any    `json:"value"`
				Description string `json:"description"`
			} `json:"args"`
		}
		if json.Unmarshal(params, &p) == nil {
			var parts []string
			for _, a := range p.Args {
				if a.Description != "" {
					parts = append(parts, a.Description)
				} else {
					parts = append(parts, fmt.Sprint(a.Value))
				}
			}
			s.record(&s.console, "console."+p.Type+": "+strings.Join(parts, " "))
		}
	case "Runtime.exceptionThrown":
		var p struct {
			Details struct {
				Text      string `json:"text"`
				Exception struct {
					Description string `json:"description"`
				} `json:"exception"`
			} `json:"exceptionDetails"`
		}
		if json.Unmarshal(params, &p) == nil {
			s.record(&s.console, "uncaught: "+p.Details.Text+" "+p.Details.Exception.Description)
		}
	case "Log.entryAdded":
		var p struct {
			Entry struct {
				Source, Level, Text, URL string
			} `json:"entry"`
		}
		if json.Unmarshal(params, &p) == nil {
			s.record(&s.console, "log "+p.Entry.Source+" "+p.Entry.Level+": "+p.Entry.Text)
		}
	case "Network.requestWillBeSent":
		var p struct {
			Request struct {
				URL string `json:"url"`
			} `json:"request"`
		}
		if json.Unmarshal(params, &p) == nil {
			u := p.Request.URL
			if u != s.pageURL && u != "about:blank" && !strings.HasPrefix(u, "data:") {
				s.record(&s.requests, u)
			}
		}
	}
}

func (s *Session) record(list *[]string, v string) {
	s.mu.Lock()
	*list = append(*list, v)
	s.mu.Unlock()
}

// call sends a command (to the page's session when page is true) and
// decodes its result into out (when not nil).
func (s *Session) call(page bool, method string, params any, out any) error {
	s.mu.Lock()
	s.nextID++
	id := s.nextID
	ch := make(chan cdpReply, 1)
	s.pending[id] = ch
	s.mu.Unlock()
	msg := map[string]any{"id": id, "method": method}
	if params != nil {
		msg["params"] = params
	}
	if page {
		msg["sessionId"] = s.session
	}
	b, err := json.Marshal(msg)
	if err != nil {
		return err
	}
	if _, err := s.toChrome.Write(append(b, 0)); err != nil {
		return fmt.Errorf("browsercheck: %s: %w", method, err)
	}
	select {
	case rep, ok := <-ch:
		if !ok {
			return fmt.Errorf("browsercheck: %s: the browser closed the connection (%v)", method, s.readErr)
		}
		if rep.Error != nil {
			return fmt.Errorf("browsercheck: %s: %s (%d)", method, rep.Error.Message, rep.Error.Code)
		}
		if out != nil {
			return json.Unmarshal(rep.Result, out)
		}
		return nil
	case <-time.After(s.opt.Timeout):
		return fmt.Errorf("browsercheck: %s: no reply within %v", method, s.opt.Timeout)
	}
}

func (s *Session) openPage() error {
	var target struct {
		TargetID string `json:"targetId"`
	}
	if err := s.call(false, "Target.createTarget", map[string]any{"url": "about:blank"}, &target); err != nil {
		return err
	}
	var att struct {
		SessionID string `json:"sessionId"`
	}
	if err := s.call(false, "Target.attachToTarget", map[string]any{"targetId": target.TargetID, "flatten": true}, &att); err != nil {
		return err
	}
	s.session = att.SessionID
	for _, m := range []string{"Page.enable", "Runtime.enable", "Log.enable", "Network.enable"} {
		if err := s.call(true, m, nil, nil); err != nil {
			return err
		}
	}
	if err := s.call(true, "Emulation.setDeviceMetricsOverride", map[string]any{
		"width": s.opt.Width, "height": s.opt.Height, "deviceScaleFactor": 1, "mobile": false}, nil); err != nil {
		return err
	}
	select {
	case <-s.loaded:
	default:
	}
	var nav struct {
		ErrorText string `json:"errorText"`
	}
	if err := s.call(true, "Page.navigate", map[string]any{"url": s.pageURL}, &nav); err != nil {
		return err
	}
	if nav.ErrorText != "" {
		return fmt.Errorf("browsercheck: opening %s: %s", s.pageURL, nav.ErrorText)
	}
	select {
	case <-s.loaded:
		return nil
	case <-time.After(s.opt.Timeout):
		return fmt.Errorf("browsercheck: %s did not load within %v", s.pageURL, s.opt.Timeout)
	}
}

// Eval evaluates a JavaScript expression in the page (awaiting it when it
// is a promise) and decodes its value, which must be JSON-serialisable,
// into out (when not nil).
func (s *Session) Eval(expr string, out any) error {
	var r struct {
		Result struct {
			Value json.RawMessage `json:"value"`
		} `json:"result"`
		Exception *struct {
			Text      string `json:"text"`
			Exception struct {
				Description string `json:"description"`
			} `json:"exception"`
		} `json:"exceptionDetails"`
	}
	if err := s.call(true, "Runtime.evaluate", map[string]any{"expression": expr, "returnByValue": true, "awaitPromise": true}, &r); err != nil {
		return err
	}
	if r.Exception != nil {
		return fmt.Errorf("browsercheck: evaluating %q: %s %s", expr, r.Exception.Text, r.Exception.Exception.Description)
	}
	if out != nil && len(r.Result.Value) > 0 {
		return json.Unmarshal(r.Result.Value, out)
	}
	return nil
}

// WaitFor evaluates expr until it is true, for at most timeout.
func (s *Session) WaitFor(expr string, timeout time.Duration) error {
	ctx, cancel := context.WithTimeout(context.Background(), timeout)
	defer cancel()
	for {
		var ok bool
		if err := s.Eval("Boolean("+expr+")", &ok); err != nil {
			return err
		}
		if ok {
			return nil
		}
		select {
		case <-ctx.Done():
			return fmt.Errorf("browsercheck: %s still false after %v", expr, timeout)
		case <-time.After(50 * time.Millisecond):
		}
	}
}

// Box is an element's laid-out rectangle in CSS pixels of the viewport.
type Box struct{ X, Y, Width, Height float64 }

// Element scrolls the element matching the CSS selector into the middle of
// the window and returns its box.
func (s *Session) Element(selector string) (Box, error) {
	var b *Box
	expr := fmt.Sprintf(`(function(){var e=document.querySelector(%s); if(!e) return null; e.scrollIntoView({block:"center",inline:"center"}); var r=e.getBoundingClientRect(); return {X:r.left,Y:r.top,Width:r.width,Height:r.height};})()`, jsString(selector))
	if err := s.Eval(expr, &b); err != nil {
		return Box{}, err
	}
	if b == nil {
		return Box{}, fmt.Errorf("browsercheck: no element matches %s", selector)
	}
	return *b, nil
}

// Click clicks the middle of the element matching selector, as a mouse
// would (press and release of the left button).
func (s *Session) Click(selector string) error {
	b, err := s.Element(selector)
	if err != nil {
		return err
	}
	return s.ClickAt(b.X+b.Width/2, b.Y+b.Height/2)
}

// ClickAt clicks at a point of the window (CSS pixels).
func (s *Session) ClickAt(x, y float64) error {
	if err := s.call(true, "Input.dispatchMouseEvent", map[string]any{"type": "mouseMoved", "x": x, "y": y}, nil); err != nil {
		return err
	}
	for _, t := range []string{"mousePressed", "mouseReleased"} {
		if err := s.call(true, "Input.dispatchMouseEvent", map[string]any{"type": t, "x": x, "y": y, "button": "left", "buttons": 1, "clickCount": 1}, nil); err != nil {
			return err
		}
	}
	return nil
}

// Drag presses the left button at (x0, y0), moves to (x1, y1) in steps and
// releases it there.
func (s *Session) Drag(x0, y0, x1, y1 float64) error {
	if err := s.call(true, "Input.dispatchMouseEvent", map[string]any{"type": "mousePressed", "x": x0, "y": y0, "button": "left", "buttons": 1, "clickCount": 1}, nil); err != nil {
		return err
	}
	for i := 1; i <= 5; i++ {
		t := float64(i) / 5
		if err := s.call(true, "Input.dispatchMouseEvent", map[string]any{"type": "mouseMoved", "x": x0 + t*(x1-x0), "y": y0 + t*(y1-y0), "button": "left", "buttons": 1}, nil); err != nil {
			return err
		}
	}
	return s.call(true, "Input.dispatchMouseEvent", map[string]any{"type": "mouseReleased", "x": x1, "y": y1, "button": "left", "buttons": 1, "clickCount": 1}, nil)
}

// Wheel turns the mouse wheel at (x, y): deltaY < 0 away from the user.
func (s *Session) Wheel(x, y, deltaY float64) error {
	return s.call(true, "Input.dispatchMouseEvent", map[string]any{"type": "mouseWheel", "x": x, "y": y, "deltaX": 0, "deltaY": deltaY}, nil)
}

// keyCodes are the Windows virtual key codes of the keys Key knows, which
// Chromium needs to deliver them as a keyboard would.
var keyCodes = map[string]int{
	"ArrowLeft": 37, "ArrowUp": 38, "ArrowRight": 39, "ArrowDown": 40,
	"PageUp": 33, "PageDown": 34, "End": 35, "Home": 36,
	"+": 187, "=": 187, "-": 189, "0": 48,
}

// Key presses and releases a key (a KeyboardEvent.key value: "ArrowUp",
// "PageDown", "+", ...) in the element that has the focus.
func (s *Session) Key(key string) error {
	code, ok := keyCodes[key]
	if !ok {
		return fmt.Errorf("browsercheck: key %q is not known", key)
	}
	for _, t := range []string{"keyDown", "keyUp"} {
		p := map[string]any{"type": t, "key": key, "windowsVirtualKeyCode": code, "nativeVirtualKeyCode": code}
		if len(key) == 1 && t == "keyDown" {
			p["text"] = key
		}
		if err := s.call(true, "Input.dispatchKeyEvent", p, nil); err != nil {
			return err
		}
	}
	return nil
}

// Screenshot saves a PNG of the window as it is now, or of the part the
// element matching clip covers (after scrolling it into view) when clip is
// not empty.
func (s *Session) Screenshot(path, clip string) error {
	params := map[string]any{"format": "png"}
	if clip != "" {
		b, err := s.Element(clip)
		if err != nil {
			return err
		}
		// The clip is in document coordinates: the box plus the scroll.
		var scroll [2]float64
		if err := s.Eval("[window.scrollX, window.scrollY]", &scroll); err != nil {
			return err
		}
		params["clip"] = map[string]any{"x": b.X + scroll[0], "y": b.Y + scroll[1], "width": b.Width, "height": b.Height, "scale": 1}
	}
	var r struct {
		Data string `json:"data"`
	}
	if err := s.call(true, "Page.captureScreenshot", params, &r); err != nil {
		return err
	}
	png, err := base64.StdEncoding.DecodeString(r.Data)
	if err != nil {
		return fmt.Errorf("browsercheck: screenshot: %w", err)
	}
	return os.WriteFile(path, png, 0o644)
}

// Problems returns what went wrong in the page so far: console messages,
// uncaught exceptions, security reports, and requests that left the page.
func (s *Session) Problems() []string {
	s.mu.Lock()
	defer s.mu.Unlock()
	var out []string
	out = append(out, s.console...)
	for _, u := range s.requests {
		out = append(out, "the page requested "+u)
	}
	return out
}

// Close ends the browser and removes its profile.
func (s *Session) Close() error {
	if s.toChrome != nil {
		// Browser.close ends Chromium cleanly; closing the pipe ends it too.
		done := make(chan struct{})
		go func() {
			_ = s.call(false, "Browser.close", nil, nil)
			close(done)
		}()
		select {
		case <-done:
		case <-time.After(5 * time.Second):
		}
		s.toChrome.Close()
	}
	var err error
	if s.cmd != nil && s.cmd.Process != nil {
		wait := make(chan error, 1)
		go func() { wait <- s.cmd.Wait() }()
		select {
		case err = <-wait:
		case <-time.After(15 * time.Second):
			s.cancel() // ends the browser's process group
			err = <-wait
		}
		var exit *exec.ExitError
		if errors.As(err, &exit) {
			err = nil // killed or closed: the browser's exit status says nothing about the page
		}
	}
	if s.cancel != nil {
		s.cancel()
	}
	os.RemoveAll(s.profile)
	return err
}

// jsString quotes s as a JavaScript string literal.
func jsString(s string) string {
	b, _ := json.Marshal(s)
	return string(b)
}
