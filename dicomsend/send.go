package dicomsend

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"net"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"time"
)

// DefaultCallingAETitle is the AE title voxgamma calls from.
const DefaultCallingAETitle = "VOXGAMMA"

// Destination is a DICOM node accepting C-STORE.
type Destination struct {
	// AETitle is the called AE title, Host a host name or IP address, Port
	// the TCP port.
	AETitle, Host string
	Port          int
	// CallingAETitle is the AE title voxgamma calls from;
	// DefaultCallingAETitle when empty.
	CallingAETitle string
}

// String writes the destination as AET@HOST:PORT.
func (d Destination) String() string {
	return d.AETitle + "@" + net.JoinHostPort(d.Host, strconv.Itoa(d.Port))
}

// CheckAETitle checks an AE title against the AE value representation
// (PS3.5 section 6.2): 1 to 16 characters of the default repertoire, no
// backslash, no control characters, not only spaces.
func CheckAETitle(ae string) error {
	switch {
	case strings.TrimSpace(ae) == "":
		return fmt.Errorf("AE title %q is empty", ae)
	case len(ae) > 16:
		return fmt.Errorf("AE title %q is longer than the 16 characters DICOM allows (PS3.5 6.2)", ae)
	}
	for _, r := range ae {
		if r < 0x20 || r > 0x7E || r == '\\' {
			return fmt.Errorf("AE title %q holds %q: DICOM allows printable ASCII without backslash (PS3.5 6.2)", ae, r)
		}
	}
	return nil
}

// ParseDestination reads AET@HOST:PORT (an IPv6 address in brackets:
// AET@[::1]:104).
func ParseDestination(s string) (Destination, error) {
	want := fmt.Errorf("%q: want AET@HOST:PORT, e.g. QA_ARCHIVE@10.0.0.5:104", s)
	at := strings.LastIndex(s, "@")
	if at <= 0 {
		return Destination{}, want
	}
	ae, hostport := s[:at], s[at+1:]
	if err := CheckAETitle(ae); err != nil {
		return Destination{}, fmt.Errorf("%q: %w", s, err)
	}
	host, port, err := net.SplitHostPort(hostport)
	if err != nil || host == "" || strings.HasPrefix(host, "-") || strings.ContainsAny(host, " \t\n") {
		return Destination{}, want
	}
	p, err := strconv.Atoi(port)
	if err != nil || p < 1 || p > 65535 {
		return Destination{}, fmt.Errorf("%q: port %q: want a number from 1 to 65535", s, port)
	}
	return Destination{AETitle: ae, Host: host, Port: p}, nil
}

// Program is the storescu program run by Send ("storescu" from the PATH).
var Program = "storescu"

// Available reports whether storescu can be run, and how to get it.
func Available() error {
	if _, err := exec.LookPath(Program); err != nil {
		return fmt.Errorf("dcmtk's %s is needed to send results over the network and was not found (%v); install it (Debian: apt-get install dcmtk)", Program, err)
	}
	return nil
}

// Timeouts of one Send, passed to storescu: to connect, for association
// messages (ACSE) and for each store (DIMSE), and for the whole run.
const (
	ConnectTimeout = 15 * time.Second
	ACSETimeout    = 30 * time.Second
	DIMSETimeout   = 120 * time.Second
	SendTimeout    = 10 * time.Minute
)

// Send sends the files to d in one association with storescu, proposing
// only the presentation contexts the files need. It returns an error naming
// the destination and what storescu said when any file was not stored.
func Send(ctx context.Context, d Destination, files []string) error {
	if len(files) == 0 {
		return nil
	}
	if err := Available(); err != nil {
		return err
	}
	calling := d.CallingAETitle
	if calling == "" {
		calling = DefaultCallingAETitle
	}
	if err := CheckAETitle(calling); err != nil {
		return fmt.Errorf("calling %w", err)
	}
	ctx, cancel := context.WithTimeout(ctx, SendTimeout)
	defer cancel()
	secs := func(t time.Duration) string { return strconv.Itoa(int(t / time.Second)) }
	args := []string{"--aetitle", calling, "--call", d.AETitle, "--required",
		"--timeout", secs(ConnectTimeout), "--acse-timeout", secs(ACSETimeout), "--dimse-timeout", secs(DIMSETimeout),
		d.Host, strconv.Itoa(d.Port)}
	// storescu has no end-of-options marker: absolute paths never start
	// with "-".
	for _, f := range files {
		abs, err := filepath.Abs(f)
		if err != nil {
			return fmt.Errorf("sending %s to %s: %w", f, d, err)
		}
		args = append(args, abs)
	}
	cmd := exec.CommandContext(ctx, Program, args...)
	var out bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &out
	err := cmd.Run()
	if ctx.Err() != nil && err != nil {
		return fmt.Errorf("sending %d files to %s: storescu did not finish within %s", len(files), d, SendTimeout)
	}
	if err != nil {
		msg := lastLines(out.String(), 3)
		var ee *exec.ExitError
		if errors.As(err, &ee) && msg != "" {
			return fmt.Errorf("sending %d files to %s: storescu failed (exit %d): %s", len(files), d, ee.ExitCode(), msg)
		}
		return fmt.Errorf("sending %d files to %s: %v %s", len(files), d, err, msg)
	}
	return nil
}

// lastLines returns the last n non-empty lines of s, joined by "; ".
func lastLines(s string, n int) string {
	var lines []string
	for _, l := range strings.Split(s, "\n") {
		if l = strings.TrimSpace(l); l != "" {
			lines = append(lines, l)
		}
	}
	if len(lines) > n {
		lines = lines[len(lines)-n:]
	}
	return strings.Join(lines, "; ")
}
