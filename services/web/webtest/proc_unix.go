//go:build unix

package webtest

import (
	"os/exec"
	"syscall"
)

// setGroup puts the browser in a process group of its own, so that its
// helper processes (zygote, renderers) end with it.
func setGroup(cmd *exec.Cmd) { cmd.SysProcAttr = &syscall.SysProcAttr{Setpgid: true} }

// signalGroup asks the browser's process group to stop (SIGTERM), or
// kills it.
func signalGroup(cmd *exec.Cmd, kill bool) {
	if cmd.Process == nil {
		return
	}
	sig := syscall.SIGTERM
	if kill {
		sig = syscall.SIGKILL
	}
	_ = syscall.Kill(-cmd.Process.Pid, sig)
}
