package batch

import (
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"time"
)

// Lock files: one batch run per output folder, or per shard of it.
const (
	// LockFile is the advisory lock of an unsharded batch run, in its
	// output folder; a shard's is ".voxgamma-batch.shard-I-of-N.lock".
	LockFile   = ".voxgamma-batch.lock"
	lockPrefix = ".voxgamma-batch"
	lockSuffix = ".lock"
)

// Lock timing. A run refreshes its lock's modification time every
// LockHeartbeat; a lock from another host is stale when older than
// LockStaleAfter (its PID cannot be checked from here).
var (
	LockHeartbeat  = 30 * time.Second
	LockStaleAfter = 5 * time.Minute
)

// lockInfo is the content of a lock file.
type lockInfo struct {
	PID  int    `json:"pid"`
	Host string `json:"host"`
	// ProcessStart is the process's start time in clock ticks since boot
	// (/proc/PID/stat field 22), to tell a reused PID from the owner.
	ProcessStart string `json:"process_start,omitempty"`
	Started      string `json:"started"`
	// Shard is "i/n" for a shard's run, "" for the whole manifest.
	Shard string `json:"shard,omitempty"`
}

// runLock is a held lock.
type runLock struct {
	path string
	info lockInfo
	stop chan struct{}
}

func lockName(s Shard) string {
	if !s.Sharded() {
		return LockFile
	}
	return fmt.Sprintf("%s.shard-%d-of-%d%s", lockPrefix, s.Index, s.Count, lockSuffix)
}

// processStart returns /proc/PID/stat's starttime (field 22), "" when
// unknown.
func processStart(pid int) string {
	data, err := os.ReadFile(fmt.Sprintf("/proc/%d/stat", pid))
	if err != nil {
		return ""
	}
	s := string(data)
	i := strings.LastIndexByte(s, ')')
	if i < 0 {
		return ""
	}
	f := strings.Fields(s[i+1:])
	// Fields after the command: state is field 3, starttime field 22.
	if len(f) < 20 {
		return ""
	}
	return f[19]
}

func hostname() string {
	h, err := os.Hostname()
	if err != nil || h == "" {
		return "unknown-host"
	}
	return h
}

// alive reports whether the process of a lock from this host still runs:
// the PID exists and, when both are known, started when the lock says.
func alive(l lockInfo) bool {
	if l.PID <= 0 {
		return false
	}
	if err := syscall.Kill(l.PID, 0); err != nil && errors.Is(err, syscall.ESRCH) {
		return false
	}
	if l.ProcessStart != "" {
		if now := processStart(l.PID); now != "" && now != l.ProcessStart {
			return false // the PID was reused
		}
	}
	return true
}

// readLock reads a lock file; ok is false when it vanished.
func readLock(path string) (info lockInfo, mtime time.Time, ok bool, err error) {
	data, err := os.ReadFile(path)
	if err != nil {
		if os.IsNotExist(err) {
			return info, mtime, false, nil
		}
		return info, mtime, false, err
	}
	st, err := os.Stat(path)
	if err != nil {
		if os.IsNotExist(err) {
			return info, mtime, false, nil
		}
		return info, mtime, false, err
	}
	if err := json.Unmarshal(data, &info); err != nil {
		// A lock being written (created, not yet filled) reads empty:
		// treat it as live while fresh.
		info = lockInfo{}
	}
	return info, st.ModTime(), true, nil
}

// staleReason says why a lock is stale, "" when its owner may be running.
func staleReason(info lockInfo, mtime time.Time, host string) string {
	switch {
	case info.PID == 0 && time.Since(mtime) > LockStaleAfter:
		return fmt.Sprintf("an unreadable lock not refreshed for %s", time.Since(mtime).Round(time.Second))
	case info.PID == 0:
		return ""
	case info.Host == host && !alive(info):
		return fmt.Sprintf("PID %d on this host (%s) is no longer running", info.PID, host)
	case info.Host != host && time.Since(mtime) > LockStaleAfter:
		return fmt.Sprintf("the lock of PID %d on host %s was not refreshed for %s (a live run refreshes it every %s)",
			info.PID, info.Host, time.Since(mtime).Round(time.Second), LockHeartbeat)
	}
	return ""
}

func (l lockInfo) owner(path string) string {
	if l.PID == 0 {
		return fmt.Sprintf("a run starting (lock file %s)", path)
	}
	what := "batch run"
	if l.Shard != "" {
		what = "batch run of shard " + l.Shard
	}
	return fmt.Sprintf("another %s, PID %d on host %s, started %s (lock file %s)", what, l.PID, l.Host, l.Started, path)
}

// conflicts reports whether two runs cannot share an output folder: only
// shards of the same count with different indexes (disjoint cases) can.
func conflicts(a, b string) bool {
	if a == "" || b == "" {
		return true
	}
	var ai, an, bi, bn int
	if _, err := fmt.Sscanf(a, "%d/%d", &ai, &an); err != nil {
		return true
	}
	if _, err := fmt.Sscanf(b, "%d/%d", &bi, &bn); err != nil {
		return true
	}
	return an != bn || ai == bi
}

// acquireLock takes the advisory lock of a batch run in out (created
// before): a file holding this process's PID and host, created only if
// absent. A lock whose owner is gone (a dead PID on this host, or a lock
// from another host not refreshed for LockStaleAfter) is taken over with a
// log message; a live one is an error naming its owner. A live lock of
// another run whose cases overlap this one's (an unsharded run, a shard of
// another count, the same shard) is an error too.
func acquireLock(out string, shard Shard, log *slog.Logger) (*runLock, error) {
	host := hostname()
	me := lockInfo{PID: os.Getpid(), Host: host, ProcessStart: processStart(os.Getpid()),
		Started: time.Now().UTC().Format(time.RFC3339)}
	if shard.Sharded() {
		me.Shard = fmt.Sprintf("%d/%d", shard.Index, shard.Count)
	}
	path := filepath.Join(out, lockName(shard))
	data, _ := json.MarshalIndent(me, "", "  ")
	data = append(data, '\n')
	inUse := func(l lockInfo, p string) error {
		return fmt.Errorf("batch: the output folder %s is in use by %s: one batch run per output folder (or per shard); wait for it to finish, or remove the lock file if that run is gone", out, l.owner(p))
	}
	acquired := false
	for try := 0; try < 5 && !acquired; try++ {
		err := createWith(path, data)
		if err == nil {
			acquired = true
			break
		}
		if !os.IsExist(err) {
			return nil, fmt.Errorf("batch: creating the lock file %s: %w", path, err)
		}
		info, mtime, ok, err := readLock(path)
		if err != nil {
			return nil, fmt.Errorf("batch: reading the lock file %s: %w", path, err)
		}
		if !ok {
			continue // released meanwhile
		}
		why := staleReason(info, mtime, host)
		if why == "" {
			return nil, inUse(info, path)
		}
		// Take it over: only one of several runs doing so at once wins the
		// rename; the others find the winner's new lock next time round.
		aside := fmt.Sprintf("%s.stale-%d-%d", path, me.PID, time.Now().UnixNano())
		if err := os.Rename(path, aside); err != nil {
			continue
		}
		os.Remove(aside)
		log.Warn("took over a stale lock", "lock", path, "reason", why, "started", info.Started)
	}
	if !acquired {
		return nil, fmt.Errorf("batch: could not take the lock file %s (other runs keep taking it)", path)
	}
	l := &runLock{path: path, info: me, stop: make(chan struct{})}
	// Runs whose cases overlap this one's, under other lock names.
	entries, err := os.ReadDir(out)
	if err != nil {
		l.release()
		return nil, fmt.Errorf("batch: listing %s: %w", out, err)
	}
	for _, e := range entries {
		n := e.Name()
		p := filepath.Join(out, n)
		if p == path || !strings.HasPrefix(n, lockPrefix) || !strings.HasSuffix(n, lockSuffix) {
			continue
		}
		info, mtime, ok, err := readLock(p)
		if err != nil || !ok || staleReason(info, mtime, host) != "" {
			continue
		}
		if info.PID == 0 || conflicts(me.Shard, info.Shard) {
			l.release()
			return nil, inUse(info, p)
		}
	}
	go l.heartbeat()
	return l, nil
}

// createWith creates path holding data, failing with an error satisfying
// os.IsExist when path exists: the data go to a temporary file first,
// which is then hard-linked to path (link(2) never replaces, also on NFS),
// so no reader ever sees the lock empty.
func createWith(path string, data []byte) error {
	tmp, err := os.CreateTemp(filepath.Dir(path), filepath.Base(path)+".new-*")
	if err != nil {
		return err
	}
	defer os.Remove(tmp.Name())
	_, werr := tmp.Write(data)
	if cerr := tmp.Close(); werr == nil {
		werr = cerr
	}
	if werr != nil {
		return werr
	}
	if err := os.Link(tmp.Name(), path); err != nil {
		var le *os.LinkError
		if errors.As(err, &le) && errors.Is(le.Err, syscall.EEXIST) {
			return os.ErrExist
		}
		return err
	}
	return nil
}

// heartbeat refreshes the lock's modification time until released, so
// that other hosts can tell a live run from a dead one.
func (l *runLock) heartbeat() {
	t := time.NewTicker(LockHeartbeat)
	defer t.Stop()
	for {
		select {
		case <-l.stop:
			return
		case now := <-t.C:
			os.Chtimes(l.path, now, now)
		}
	}
}

// release removes the lock file if it is still this run's.
func (l *runLock) release() {
	select {
	case <-l.stop:
		return
	default:
	}
	close(l.stop)
	if info, _, ok, err := readLock(l.path); err == nil && ok && info.PID == l.info.PID && info.Host == l.info.Host && info.Started == l.info.Started {
		os.Remove(l.path)
	}
}
