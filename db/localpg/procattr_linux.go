package localpg

import (
	"os/exec"
	"syscall"
)

// tieToParent puts the server in its own process group (a terminal's Ctrl-C
// reaches only this process, which then stops the server in order) and asks
// the kernel to send it SIGQUIT if the thread that started it dies.
func tieToParent(cmd *exec.Cmd) {
	if cmd.SysProcAttr == nil {
		cmd.SysProcAttr = &syscall.SysProcAttr{}
	}
	cmd.SysProcAttr.Setpgid = true
	cmd.SysProcAttr.Pdeathsig = syscall.SIGQUIT
}
