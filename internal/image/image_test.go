package image

import (
	"archive/tar"
	"bytes"
	"encoding/json"
	"errors"
	"io"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	v1 "github.com/google/go-containerregistry/pkg/v1"
	"github.com/google/go-containerregistry/pkg/v1/layout"
	"github.com/google/go-containerregistry/pkg/v1/mutate"
	"github.com/google/go-containerregistry/pkg/v1/tarball"
	"github.com/google/go-containerregistry/pkg/v1/validate"
)

// spec writes a stand-in binary and certificate bundle; the image does not
// care what the binary is.
func spec(t *testing.T, binary string) Spec {
	t.Helper()
	dir := t.TempDir()
	bin, certs := filepath.Join(dir, "plumbline"), filepath.Join(dir, "ca.crt")
	if err := os.WriteFile(bin, []byte(binary), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(certs, []byte("-----BEGIN CERTIFICATE-----\nstand-in\n-----END CERTIFICATE-----\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	return Spec{Binary: bin, CACerts: certs, Arch: "amd64", Version: "v0.1.0"}
}

func archive(t *testing.T, name string, s Spec) []byte {
	t.Helper()
	img, err := Build(s)
	if err != nil {
		t.Fatal(err)
	}
	var b bytes.Buffer
	if err := WriteArchive(&b, name, img); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

// untar writes an archive's files into a directory.
func untar(t *testing.T, data []byte) string {
	t.Helper()
	dir := t.TempDir()
	tr := tar.NewReader(bytes.NewReader(data))
	for {
		h, err := tr.Next()
		if errors.Is(err, io.EOF) {
			return dir
		}
		if err != nil {
			t.Fatal(err)
		}
		p := filepath.Join(dir, h.Name)
		if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
			t.Fatal(err)
		}
		b, err := io.ReadAll(tr)
		if err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(p, b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
}

// The archive reads back, by an independent reader of each format, as the
// same image: an OCI image layout whose index names it for containerd, and
// a docker save archive with its tag. The image is what the Dockerfile
// builds: the binary at /plumbline as the entrypoint, user 65532, the CA
// certificates, a writable /tmp.
func TestArchiveReadsBackInBothFormats(t *testing.T) {
	s := spec(t, "#!stand-in for the static binary\n")
	data := archive(t, "plumbline:dev", s)
	dir := untar(t, data)

	// OCI layout, as ctr images import and kind load image-archive read it.
	p, err := layout.FromPath(dir)
	if err != nil {
		t.Fatal(err)
	}
	idx, err := p.ImageIndex()
	if err != nil {
		t.Fatal(err)
	}
	im, err := idx.IndexManifest()
	if err != nil {
		t.Fatal(err)
	}
	if len(im.Manifests) != 1 || im.Manifests[0].Annotations["io.containerd.image.name"] != "docker.io/library/plumbline:dev" ||
		im.Manifests[0].Annotations["org.opencontainers.image.ref.name"] != "dev" {
		t.Fatalf("index: %+v", im.Manifests)
	}
	oci, err := p.Image(im.Manifests[0].Digest)
	if err != nil {
		t.Fatal(err)
	}
	if err := validate.Image(oci); err != nil {
		t.Fatalf("the OCI image does not validate (digests, sizes, diff ids): %v", err)
	}

	// docker save format, as docker load reads it.
	docker, err := tarball.Image(func() (io.ReadCloser, error) { return io.NopCloser(bytes.NewReader(data)), nil }, nil)
	if err != nil {
		t.Fatal(err)
	}
	if err := validate.Image(docker); err != nil {
		t.Fatalf("the docker archive does not validate: %v", err)
	}
	d1, _ := oci.ConfigName()
	d2, _ := docker.ConfigName()
	if d1 != d2 {
		t.Errorf("the two formats hold different configs: %s, %s", d1, d2)
	}
	var tags []struct{ RepoTags []string }
	if err := json.Unmarshal(mustRead(t, filepath.Join(dir, "manifest.json")), &tags); err != nil || len(tags) != 1 || !slices.Equal(tags[0].RepoTags, []string{"plumbline:dev"}) {
		t.Errorf("manifest.json tags: %+v, %v", tags, err)
	}

	cf, err := oci.ConfigFile()
	if err != nil {
		t.Fatal(err)
	}
	if cf.Config.User != "65532:65532" || !slices.Equal(cf.Config.Entrypoint, []string{"/plumbline"}) || cf.OS != "linux" || cf.Architecture != "amd64" ||
		cf.Config.Labels["org.opencontainers.image.version"] != "v0.1.0" {
		t.Errorf("config: %+v", cf.Config)
	}
	files := filesOf(t, oci)
	for name, want := range map[string]struct {
		mode int64
		uid  int
		text string
	}{
		"plumbline":                         {0o755, 0, "#!stand-in for the static binary\n"},
		"etc/ssl/certs/ca-certificates.crt": {0o644, 0, "stand-in"},
		"etc/passwd":                        {0o644, 0, "nonroot:x:65532:65532:"},
		"etc/group":                         {0o644, 0, "nonroot:x:65532:"},
		"tmp":                               {0o1777, 0, ""},
		"home/nonroot":                      {0o700, 65532, ""},
	} {
		f, ok := files[name]
		switch {
		case !ok:
			t.Errorf("the image has no %s", name)
		case f.h.Mode != want.mode || f.h.Uid != want.uid || !strings.Contains(f.body, want.text):
			t.Errorf("%s: mode %o uid %d %q; want mode %o uid %d containing %q", name, f.h.Mode, f.h.Uid, f.body, want.mode, want.uid, want.text)
		}
	}
}

// The same binary gives the same image, byte for byte, so a rebuild does
// not make a new image for nothing; another binary gives another.
func TestArchiveIsReproducible(t *testing.T) {
	s := spec(t, "one binary")
	a, b := archive(t, "plumbline:dev", s), archive(t, "plumbline:dev", s)
	if !bytes.Equal(a, b) {
		t.Error("two builds of the same binary differ")
	}
	if c := archive(t, "plumbline:dev", spec(t, "another binary")); bytes.Equal(a, c) {
		t.Error("two binaries give the same archive")
	}
}

func TestImageNames(t *testing.T) {
	for name, want := range map[string]string{
		"plumbline:dev":                     "docker.io/library/plumbline:dev",
		"larkspur/plumbline:v1":             "docker.io/larkspur/plumbline:v1",
		"registry.larkspur.example/ml/pl:1": "registry.larkspur.example/ml/pl:1",
		"localhost:5000/plumbline:dev":      "localhost:5000/plumbline:dev",
	} {
		if got, _, err := fullName(name); err != nil || got != want {
			t.Errorf("%s: %q, %v; want %q", name, got, err, want)
		}
	}
	for _, bad := range []string{"plumbline", "plumbline:", ":dev", "localhost:5000/plumbline"} {
		if _, _, err := fullName(bad); err == nil || !strings.Contains(err.Error(), "want REPOSITORY:TAG") {
			t.Errorf("%q: %v, want a refusal", bad, err)
		}
	}
	if _, err := Build(Spec{Binary: "no-such-binary", CACerts: "x"}); err == nil || !strings.Contains(err.Error(), "the binary") {
		t.Errorf("a missing binary: %v", err)
	}
}

type entry struct {
	h    *tar.Header
	body string
}

// filesOf lists the image's files as its one layer holds them.
func filesOf(t *testing.T, img v1.Image) map[string]entry {
	t.Helper()
	rc := mutate.Extract(img)
	defer rc.Close()
	out := map[string]entry{}
	tr := tar.NewReader(rc)
	for {
		h, err := tr.Next()
		if errors.Is(err, io.EOF) {
			return out
		}
		if err != nil {
			t.Fatal(err)
		}
		b, _ := io.ReadAll(tr)
		out[h.Name] = entry{h, string(b)}
	}
}

func mustRead(t *testing.T, p string) []byte {
	t.Helper()
	b, err := os.ReadFile(p)
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// Extra files (a dynamically linked program's libraries) go into the
// layer at their path, with the directories above them, read through the
// host's symbolic links; a relative path in the image is refused.
func TestExtraFiles(t *testing.T) {
	s := spec(t, "a program")
	dir := t.TempDir()
	lib := filepath.Join(dir, "libc.so.6")
	if err := os.WriteFile(lib, []byte("the library"), 0o644); err != nil {
		t.Fatal(err)
	}
	link := filepath.Join(dir, "ld.so")
	if err := os.Symlink(lib, link); err != nil {
		t.Fatal(err)
	}
	s.Path = "/bin/prometheus"
	s.Files = map[string]string{"/lib/x86_64-linux-gnu/libc.so.6": lib, "/lib64/ld-linux-x86-64.so.2": link}
	img, err := Build(s)
	if err != nil {
		t.Fatal(err)
	}
	files := filesOf(t, img)
	for _, name := range []string{"bin", "lib", "lib/x86_64-linux-gnu", "lib64"} {
		if f, ok := files[name]; !ok || f.h.Typeflag != tar.TypeDir {
			t.Errorf("no directory %s in the image", name)
		}
	}
	for _, name := range []string{"lib/x86_64-linux-gnu/libc.so.6", "lib64/ld-linux-x86-64.so.2"} {
		if f, ok := files[name]; !ok || f.body != "the library" || f.h.Typeflag != tar.TypeReg {
			t.Errorf("%s in the image: %+v", name, f)
		}
	}
	if f, ok := files["bin/prometheus"]; !ok || f.body != "a program" {
		t.Errorf("the program is not at its path: %+v", f)
	}
	s.Files = map[string]string{"lib/libc.so.6": lib}
	if _, err := Build(s); err == nil || !strings.Contains(err.Error(), "absolute") {
		t.Errorf("a relative path in the image: %v", err)
	}
}
