// Package proc starts and stops the processes of the test clusters (the
// control plane's components, a kubelet, containerd): each in its own
// process group with its output in a log file, stopped with SIGTERM and,
// after a grace period, SIGKILL to the whole group.
package proc

import (
	"fmt"
	"os"
	"os/exec"
	"syscall"
	"time"
)

// Proc is a running process and its log.
type Proc struct {
	Cmd *exec.Cmd
	Log *os.File
}

// Start runs bin with args, its output to a new log file at logPath.
func Start(bin string, args []string, logPath string) (*Proc, error) {
	log, err := os.Create(logPath)
	if err != nil {
		return nil, fmt.Errorf("create %s: %w", logPath, err)
	}
	cmd := exec.Command(bin, args...)
	cmd.Stdout, cmd.Stderr = log, log
	// Its own process group: a Ctrl-C at the terminal reaches the test or
	// the demo first, which stops the components in order; Stop ends
	// whatever the process started.
	cmd.SysProcAttr = &syscall.SysProcAttr{Setpgid: true}
	if err := cmd.Start(); err != nil {
		log.Close()
		return nil, fmt.Errorf("start %s: %w", bin, err)
	}
	return &Proc{Cmd: cmd, Log: log}, nil
}

// Stop ends the process group: SIGTERM, then SIGKILL after grace.
func (p *Proc) Stop(grace time.Duration) {
	if p.Cmd.Process != nil {
		_ = syscall.Kill(-p.Cmd.Process.Pid, syscall.SIGTERM)
		done := make(chan struct{})
		go func() { _ = p.Cmd.Wait(); close(done) }()
		select {
		case <-done:
		case <-time.After(grace):
			_ = syscall.Kill(-p.Cmd.Process.Pid, syscall.SIGKILL)
			<-done
		}
	}
	p.Log.Close()
}
