// Package containerd runs a private containerd (Debian's containerd and
// runc) for tests that need real containers: its own root, state and socket
// under a directory of the test, so it touches nothing of the host's, and
// it is stopped with the test. It needs root (runc makes namespaces and
// cgroups).
package containerd

import (
	"context"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"time"

	"plumbline.dev/plumbline/internal/testenv/proc"
)

// Namespace is the containerd namespace the kubelet's CRI uses; images
// imported there are the ones a node's pods can run.
const Namespace = "k8s.io"

// ErrUnavailable says why this machine cannot run a private containerd.
var ErrUnavailable = errors.New("containerd unavailable")

// Available reports why containerd cannot run here, or nil.
func Available() error {
	for _, bin := range []string{"containerd", "ctr", "runc"} {
		if _, err := exec.LookPath(bin); err != nil {
			return fmt.Errorf("%w: %s is not installed (apt-get install -y containerd runc; make containerd)", ErrUnavailable, bin)
		}
	}
	if os.Geteuid() != 0 {
		return fmt.Errorf("%w: real containers need root (runc makes namespaces and cgroups)", ErrUnavailable)
	}
	return nil
}

// Daemon is a running private containerd.
type Daemon struct {
	// Socket is its gRPC address.
	Socket string
	dir    string
	proc   *proc.Proc
}

// Start starts a containerd whose root, state and socket lie under dir,
// with the CRI plugin off (a node's own start turns it on with its config).
func Start(dir string) (*Daemon, error) {
	return StartWithConfig(dir, func(root, state, socket string) string {
		return fmt.Sprintf("version = 2\nroot = %q\nstate = %q\ndisabled_plugins = [\"io.containerd.grpc.v1.cri\"]\n[grpc]\n  address = %q\n", root, state, socket)
	})
}

// StartWithConfig starts a containerd under dir with the configuration
// config writes for its root, state and socket paths.
func StartWithConfig(dir string, config func(root, state, socket string) string) (*Daemon, error) {
	if err := Available(); err != nil {
		return nil, err
	}
	if err := os.MkdirAll(dir, 0o700); err != nil {
		return nil, err
	}
	d := &Daemon{Socket: filepath.Join(dir, "containerd.sock"), dir: dir}
	cfg := filepath.Join(dir, "config.toml")
	if err := os.WriteFile(cfg, []byte(config(filepath.Join(dir, "root"), filepath.Join(dir, "state"), d.Socket)), 0o600); err != nil {
		return nil, err
	}
	p, err := proc.Start("containerd", []string{"--config", cfg}, filepath.Join(dir, "containerd.log"))
	if err != nil {
		return nil, err
	}
	d.proc = p
	deadline := time.Now().Add(20 * time.Second)
	for {
		if _, err := d.Ctr(context.Background(), "version"); err == nil {
			return d, nil
		}
		if time.Now().After(deadline) {
			d.Stop()
			return nil, fmt.Errorf("containerd did not answer on %s within 20s (log: %s)", d.Socket, p.Log.Name())
		}
		time.Sleep(100 * time.Millisecond)
	}
}

// Ctr runs ctr against the daemon in Namespace and returns its output.
func (d *Daemon) Ctr(ctx context.Context, args ...string) (string, error) {
	out, err := exec.CommandContext(ctx, "ctr", append([]string{"--address", d.Socket, "--namespace", Namespace}, args...)...).CombinedOutput()
	if err != nil {
		return string(out), fmt.Errorf("ctr %s: %w: %s", strings.Join(args, " "), err, out)
	}
	return string(out), nil
}

// Import imports an image archive (OCI layout or docker save) and returns
// ctr's report.
func (d *Daemon) Import(ctx context.Context, archive string) (string, error) {
	return d.Ctr(ctx, "images", "import", archive)
}

// Run runs a container of image to its end with args and returns what it
// printed.
func (d *Daemon) Run(ctx context.Context, image, id string, args ...string) (string, error) {
	return d.Ctr(ctx, append([]string{"run", "--rm", image, id}, args...)...)
}

// Stop stops the daemon and its shims, and unmounts what it mounted under
// its directory.
func (d *Daemon) Stop() {
	if d.proc != nil {
		d.proc.Stop(10 * time.Second)
	}
	// Shims outlive the daemon by design; theirs carry the socket's path.
	_ = exec.Command("pkill", "-f", "containerd-shim.*"+d.Socket).Run()
	if mounts, err := os.ReadFile("/proc/self/mounts"); err == nil {
		for _, l := range strings.Split(string(mounts), "\n") {
			if f := strings.Fields(l); len(f) > 1 && strings.HasPrefix(f[1], d.dir+"/") {
				_ = syscall.Unmount(f[1], syscall.MNT_DETACH)
			}
		}
	}
}
