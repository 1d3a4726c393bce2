package image

import (
	"context"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"plumbline.dev/plumbline/internal/testenv/containerd"
)

// The archive of the real binary imports into a real containerd (as a
// node's runtime would hold it, in the k8s.io namespace) and runs there
// under runc: the image is one a cluster can run, not only one that
// parses. Needs root and Debian's containerd and runc; make test requires
// it (PLUMBLINE_REQUIRE_CONTAINERD=1), elsewhere it is skipped with the
// reason.
func TestImageRunsInContainerd(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the binary and runs containerd")
	}
	if err := containerd.Available(); err != nil {
		if os.Getenv("PLUMBLINE_REQUIRE_CONTAINERD") != "" {
			t.Fatalf("PLUMBLINE_REQUIRE_CONTAINERD is set: %v", err)
		}
		t.Skip(err)
	}
	dir := t.TempDir()
	bin := filepath.Join(dir, "plumbline")
	// The usual build flags, so the build cache serves it.
	build := exec.Command("go", "build", "-ldflags", "-X main.version=image-test", "-o", bin, ".")
	build.Dir = filepath.Join("..", "..")
	build.Env = append(os.Environ(), "CGO_ENABLED=0")
	if out, err := build.CombinedOutput(); err != nil {
		t.Fatalf("build the static binary: %v\n%s", err, out)
	}
	archive := filepath.Join(dir, "plumbline.tar")
	if _, err := WriteFile(archive, "plumbline:image-test", Spec{Binary: bin, CACerts: "/etc/ssl/certs/ca-certificates.crt", Arch: "amd64", Version: "image-test"}); err != nil {
		t.Fatal(err)
	}

	d, err := containerd.Start(filepath.Join(dir, "containerd"))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(d.Stop)
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	if out, err := d.Import(ctx, archive); err != nil || !strings.Contains(out, "docker.io/library/plumbline:image-test") {
		t.Fatalf("ctr images import: %v\n%s", err, out)
	}
	if out, err := d.Ctr(ctx, "images", "check"); err != nil || !strings.Contains(out, "complete") {
		t.Fatalf("ctr images check: %v\n%s", err, out)
	}
	// ctr can miss the output of a container that exits at once (seen
	// under load with containerd 1.6): the run is tried again then.
	var out string
	for i := range 3 {
		out, err = d.Run(ctx, "docker.io/library/plumbline:image-test", fmt.Sprintf("plumbline-version-%d", i), "/plumbline", "version")
		if err != nil || strings.TrimSpace(out) != "" {
			break
		}
	}
	if err != nil || strings.TrimSpace(out) != "image-test" {
		t.Fatalf("the image's binary in a container: %q, %v", out, err)
	}
	// A usage error exits 2 in the container as on the host; ctr passes the
	// container's exit status on.
	out, err = d.Run(ctx, "docker.io/library/plumbline:image-test", "plumbline-backtest", "/plumbline", "backtest", "--target", "0.8", "--schedule", "@daily")
	var exit *exec.ExitError
	if !errors.As(err, &exit) || exit.ExitCode() != 2 || out != "" && !strings.Contains(out, "--history is required") {
		t.Errorf("a usage error in the container: %q, %v", out, err)
	}
}
