package toolcheck

import (
	"os/exec"
	"syscall"
)

// DieWithParent has the kernel kill cmd's process when the test process
// dies, so that a test stopped by go test's -timeout (which runs no
// t.Cleanup) leaves no server behind. Call it before cmd.Start. Strictly
// the signal follows the thread that started the child, and Go ends a
// thread only when a goroutine locked to it exits, which the tests do not
// do.
func DieWithParent(cmd *exec.Cmd) {
	if cmd.SysProcAttr == nil {
		cmd.SysProcAttr = &syscall.SysProcAttr{}
	}
	cmd.SysProcAttr.Pdeathsig = syscall.SIGKILL
}
