//go:build !unix

package browsercheck

import "os/exec"

// ownGroup leaves the default cancellation (ending the browser process).
func ownGroup(cmd *exec.Cmd) {}
