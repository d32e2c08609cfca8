//go:build unix

package browsercheck

import (
	"os/exec"
	"syscall"
)

// ownGroup makes the browser the leader of a new process group and, on
// cancellation, ends that group (the browser and the helpers it started)
// by its id.
func ownGroup(cmd *exec.Cmd) {
	cmd.SysProcAttr = &syscall.SysProcAttr{Setpgid: true}
	cmd.Cancel = func() error {
		return syscall.Kill(-cmd.Process.Pid, syscall.SIGKILL)
	}
}
