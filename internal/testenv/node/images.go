package node

import (
	"bufio"
	"bytes"
	"context"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strings"

	"plumbline.dev/plumbline/internal/image"
)

// PlumblineImage builds this module's plumbline binary (static, stamped
// with version) and writes its image archive, named name, into dir.
func PlumblineImage(ctx context.Context, dir, name, version string) (string, error) {
	bin := filepath.Join(dir, "plumbline")
	build := exec.CommandContext(ctx, "go", "build", "-ldflags", "-X main.version="+version, "-o", bin, ".")
	build.Dir = moduleRoot()
	build.Env = append(os.Environ(), "CGO_ENABLED=0")
	if out, err := build.CombinedOutput(); err != nil {
		return "", fmt.Errorf("build the static plumbline binary: %w: %s", err, out)
	}
	archive := filepath.Join(dir, "plumbline.tar")
	if _, err := image.WriteFile(archive, name, image.Spec{Binary: bin, CACerts: caBundle, Arch: runtime.GOARCH, Version: version}); err != nil {
		return "", err
	}
	return archive, nil
}

// caBundle is Debian's CA certificates, which the images carry.
const caBundle = "/etc/ssl/certs/ca-certificates.crt"

// PrometheusImage writes an image archive, named name, of the prometheus
// on the PATH (Debian's package, or one built into bin/prom) at
// /bin/prometheus, with the shared libraries it is linked against (as ldd
// lists them), into dir. A cluster with a registry uses the project's own
// Prometheus image instead.
func PrometheusImage(ctx context.Context, dir, name string) (string, error) {
	bin, err := exec.LookPath("prometheus")
	if err != nil {
		return "", fmt.Errorf("prometheus is not on the PATH (make prometheus installs it): %w", err)
	}
	libs, err := sharedLibraries(ctx, bin)
	if err != nil {
		return "", err
	}
	archive := filepath.Join(dir, "prometheus.tar")
	if _, err := image.WriteFile(archive, name, image.Spec{Binary: bin, Path: "/bin/prometheus", CACerts: caBundle,
		Arch: runtime.GOARCH, Version: "e2e", Files: libs}); err != nil {
		return "", err
	}
	return archive, nil
}

// sharedLibraries maps each library a dynamically linked program loads,
// and its loader, to the same path in an image; a static program has none.
func sharedLibraries(ctx context.Context, bin string) (map[string]string, error) {
	out, err := exec.CommandContext(ctx, "ldd", bin).CombinedOutput()
	if err != nil {
		if bytes.Contains(out, []byte("not a dynamic executable")) {
			return nil, nil
		}
		return nil, fmt.Errorf("ldd %s: %w: %s", bin, err, out)
	}
	libs := map[string]string{}
	sc := bufio.NewScanner(bytes.NewReader(out))
	for sc.Scan() {
		// "libc.so.6 => /lib/x86_64-linux-gnu/libc.so.6 (0x...)" or
		// "/lib64/ld-linux-x86-64.so.2 (0x...)"; linux-vdso has no file.
		f := strings.Fields(sc.Text())
		switch {
		case len(f) >= 3 && f[1] == "=>" && filepath.IsAbs(f[2]):
			libs[f[2]] = f[2]
		case len(f) >= 1 && filepath.IsAbs(f[0]):
			libs[f[0]] = f[0]
		}
	}
	return libs, nil
}
