//go:build !linux

package localpg

import (
	"os/exec"
	"syscall"
)

// tieToParent puts the server in its own process group; without Linux's
// parent-death signal a server whose parent crashes keeps running until
// stopped by hand.
func tieToParent(cmd *exec.Cmd) {
	if cmd.SysProcAttr == nil {
		cmd.SysProcAttr = &syscall.SysProcAttr{}
	}
	cmd.SysProcAttr.Setpgid = true
}
