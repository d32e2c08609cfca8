// Package scptest starts, for tests, a DICOM storage node on the loopback
// interface: dcmtk's storescp (Debian's dcmtk) on a free port, stopped when
// the test ends. Without storescp the test fails when the environment
// variable CI is set and is skipped otherwise (see internal/reftool).
package scptest

import (
	"bytes"
	"fmt"
	"net"
	"os/exec"
	"strconv"
	"sync"
	"testing"
	"time"

	"voxgamma/internal/reftool"
)

// Install says how to get storescp and storescu.
const Install = "apt-get install dcmtk"

// Node is a running storescp.
type Node struct {
	// AETitle and Port address it on 127.0.0.1; Dir is its output folder.
	AETitle string
	Port    int
	Dir     string
	cmd     *exec.Cmd
	mu      sync.Mutex
	log     bytes.Buffer
}

// Log returns what storescp printed so far (for failure messages).
func (n *Node) Log() string {
	n.mu.Lock()
	defer n.mu.Unlock()
	return n.log.String()
}

type lockedWriter struct{ n *Node }

func (w lockedWriter) Write(p []byte) (int, error) {
	w.n.mu.Lock()
	defer w.n.mu.Unlock()
	return w.n.log.Write(p)
}

// FreePort returns a TCP port free on 127.0.0.1 at the time of the call.
func FreePort(t testing.TB) int {
	t.Helper()
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatalf("finding a free port: %v", err)
	}
	defer l.Close()
	return l.Addr().(*net.TCPAddr).Port
}

// WaitListening waits until something accepts TCP connections on
// 127.0.0.1:port, or fails the test after timeout. exited, when not nil,
// reports a process that ended meanwhile.
func WaitListening(t testing.TB, port int, timeout time.Duration, exited func() error) {
	t.Helper()
	deadline := time.Now().Add(timeout)
	for {
		c, err := net.DialTimeout("tcp", net.JoinHostPort("127.0.0.1", strconv.Itoa(port)), time.Second)
		if err == nil {
			c.Close()
			return
		}
		if exited != nil {
			if err := exited(); err != nil {
				t.Fatalf("the listener on port %d ended before accepting connections: %v", port, err)
			}
		}
		if time.Now().After(deadline) {
			t.Fatalf("nothing accepts connections on 127.0.0.1:%d after %s", port, timeout)
		}
		time.Sleep(50 * time.Millisecond)
	}
}

// Start runs storescp with AE title aet writing into dir (extra options
// before the port, e.g. "--sort-on-study-uid", "study"), on a free
// loopback port, and stops it (by its process) when the test ends.
func Start(t testing.TB, aet, dir string, extra ...string) *Node {
	t.Helper()
	prog := reftool.Program(t, "storescp", Install)
	reftool.Program(t, "storescu", Install)
	var lastErr error
	for attempt := 0; attempt < 3; attempt++ {
		n := &Node{AETitle: aet, Dir: dir, Port: FreePort(t)}
		args := append([]string{"--aetitle", aet, "--output-directory", dir}, extra...)
		args = append(args, strconv.Itoa(n.Port))
		n.cmd = exec.Command(prog, args...)
		n.cmd.Stdout, n.cmd.Stderr = lockedWriter{n}, lockedWriter{n}
		if err := n.cmd.Start(); err != nil {
			t.Fatalf("starting storescp: %v", err)
		}
		done := make(chan error, 1)
		go func() { done <- n.cmd.Wait() }()
		exited := func() error {
			select {
			case err := <-done:
				done <- err
				return fmt.Errorf("storescp exited (%v): %s", err, n.Log())
			default:
				return nil
			}
		}
		ok := func() (ok bool) {
			// A port taken between FreePort and storescp's bind ends
			// storescp at once: try another.
			deadline := time.Now().Add(10 * time.Second)
			for time.Now().Before(deadline) {
				if err := exited(); err != nil {
					lastErr = err
					return false
				}
				c, err := net.DialTimeout("tcp", net.JoinHostPort("127.0.0.1", strconv.Itoa(n.Port)), time.Second)
				if err == nil {
					c.Close()
					return true
				}
				time.Sleep(50 * time.Millisecond)
			}
			lastErr = fmt.Errorf("storescp does not accept connections on port %d after 10 s: %s", n.Port, n.Log())
			return false
		}()
		if !ok {
			n.cmd.Process.Kill()
			continue
		}
		t.Cleanup(func() {
			n.cmd.Process.Kill()
			<-done
		})
		return n
	}
	t.Fatalf("could not start storescp: %v", lastErr)
	return nil
}
