//go:build !linux

package toolcheck

import "os/exec"

// DieWithParent does nothing here: only Linux ties a child's life to its
// parent's. A test stopped by -timeout may leave cmd's process running.
func DieWithParent(cmd *exec.Cmd) {}
