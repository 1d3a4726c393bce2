// Package image builds the plumbline container image without a container
// engine: one layer holding the static binary, the CA certificates and the
// non-root user, with the same content as the Dockerfile's result, written
// as one archive that is both an OCI image layout (for ctr images import
// and kind load image-archive) and a docker save archive (manifest.json,
// for docker load). The layer and the archive are reproducible: the same
// binary gives the same digests.
package image

import (
	"archive/tar"
	"bytes"
	"encoding/json"
	"fmt"
	"io"
	"maps"
	"os"
	"path"
	"path/filepath"
	"slices"
	"strings"
	"time"

	v1 "github.com/google/go-containerregistry/pkg/v1"
	"github.com/google/go-containerregistry/pkg/v1/empty"
	"github.com/google/go-containerregistry/pkg/v1/mutate"
	"github.com/google/go-containerregistry/pkg/v1/tarball"
	"github.com/google/go-containerregistry/pkg/v1/types"
)

// The image's user, as the Dockerfile's distroless base has it.
const (
	UID  = 65532
	User = "65532:65532"
	// Entrypoint is where the binary lies in the image.
	Entrypoint = "/plumbline"
)

// epoch is the time every file and the image are stamped with, so the same
// binary gives the same image.
var epoch = time.Unix(0, 0).UTC()

// Spec says what goes into the image.
type Spec struct {
	// Binary is the static plumbline binary (CGO_ENABLED=0).
	Binary string
	// CACerts is a PEM bundle of CA certificates, for the manager's and the
	// tools' TLS (Debian's /etc/ssl/certs/ca-certificates.crt).
	CACerts string
	// Arch is the binary's GOARCH.
	Arch string
	// Version labels the image.
	Version string
	// Path is where the binary lies in the image and what runs; empty is
	// Entrypoint (/plumbline). Other images of the tests (a node's sandbox
	// "pause" image) set their own.
	Path string
	// Files are more files for the image, by their path in it, read from
	// the host path they map to (a symbolic link is followed): the shared
	// libraries of a dynamically linked program such as Debian's
	// prometheus, for the end-to-end suite's own Prometheus image.
	Files map[string]string
}

// Build makes the image.
func Build(s Spec) (v1.Image, error) {
	bin, err := os.ReadFile(s.Binary)
	if err != nil {
		return nil, fmt.Errorf("the binary: %w", err)
	}
	certs, err := os.ReadFile(s.CACerts)
	if err != nil {
		return nil, fmt.Errorf("the CA certificates: %w", err)
	}
	entry := s.Path
	if entry == "" {
		entry = Entrypoint
	}
	extra := make(map[string][]byte, len(s.Files))
	for in, host := range s.Files {
		if !path.IsAbs(in) || path.Clean(in) != in {
			return nil, fmt.Errorf("image file %q: want an absolute, clean path in the image", in)
		}
		b, err := os.ReadFile(host)
		if err != nil {
			return nil, fmt.Errorf("image file %s: %w", in, err)
		}
		extra[in] = b
	}
	layer, err := rootLayer(entry, bin, certs, extra)
	if err != nil {
		return nil, err
	}
	img, err := mutate.AppendLayers(empty.Image, layer)
	if err != nil {
		return nil, fmt.Errorf("add the layer: %w", err)
	}
	cf, err := img.ConfigFile()
	if err != nil {
		return nil, err
	}
	cf = cf.DeepCopy()
	cf.OS, cf.Architecture, cf.Created = "linux", s.Arch, v1.Time{Time: epoch}
	cf.Config = v1.Config{
		User:       User,
		Entrypoint: []string{entry},
		Env:        []string{"PATH=/usr/local/bin:/usr/bin:/bin", "SSL_CERT_FILE=/etc/ssl/certs/ca-certificates.crt"},
		WorkingDir: "/",
		Labels: map[string]string{
			"org.opencontainers.image.title":   strings.TrimPrefix(entry, "/"),
			"org.opencontainers.image.version": s.Version,
		},
	}
	if img, err = mutate.ConfigFile(img, cf); err != nil {
		return nil, fmt.Errorf("set the config: %w", err)
	}
	img = mutate.MediaType(img, types.OCIManifestSchema1)
	return mutate.ConfigMediaType(img, types.OCIConfigJSON), nil
}

// rootLayer is the image's one layer: the binary, the certificates, the
// user and group files, a writable /tmp, and the extra files by their path
// in the image.
func rootLayer(entry string, bin, certs []byte, extra map[string][]byte) (v1.Layer, error) {
	var b bytes.Buffer
	tw := tar.NewWriter(&b)
	dir := func(name string, mode int64) error {
		return tw.WriteHeader(&tar.Header{Typeflag: tar.TypeDir, Name: name + "/", Mode: mode, ModTime: epoch, Format: tar.FormatPAX})
	}
	file := func(name string, mode int64, data []byte) error {
		if err := tw.WriteHeader(&tar.Header{Typeflag: tar.TypeReg, Name: name, Mode: mode, Size: int64(len(data)), ModTime: epoch, Format: tar.FormatPAX}); err != nil {
			return err
		}
		_, err := tw.Write(data)
		return err
	}
	passwd := fmt.Sprintf("root:x:0:0:root:/root:/sbin/nologin\nnonroot:x:%d:%d:nonroot:/home/nonroot:/sbin/nologin\n", UID, UID)
	group := fmt.Sprintf("root:x:0:\nnonroot:x:%d:\n", UID)
	steps := []func() error{
		func() error { return dir("etc", 0o755) },
		func() error { return file("etc/passwd", 0o644, []byte(passwd)) },
		func() error { return file("etc/group", 0o644, []byte(group)) },
		func() error { return dir("etc/ssl", 0o755) },
		func() error { return dir("etc/ssl/certs", 0o755) },
		func() error { return file("etc/ssl/certs/ca-certificates.crt", 0o644, certs) },
		func() error { return dir("home", 0o755) },
		func() error {
			return tw.WriteHeader(&tar.Header{Typeflag: tar.TypeDir, Name: "home/nonroot/", Mode: 0o700, Uid: UID, Gid: UID, ModTime: epoch, Format: tar.FormatPAX})
		},
		func() error { return dir("tmp", 0o1777) },
	}
	// The program and the extra files in a stable order, each after the
	// directories above it that are not there yet.
	made := map[string]bool{"etc": true, "etc/ssl": true, "etc/ssl/certs": true, "home": true, "tmp": true}
	add := func(name string, data []byte) {
		var parents []string
		for d := path.Dir(name); d != "."; d = path.Dir(d) {
			parents = append([]string{d}, parents...)
		}
		for _, d := range parents {
			if !made[d] {
				made[d] = true
				steps = append(steps, func() error { return dir(d, 0o755) })
			}
		}
		steps = append(steps, func() error { return file(name, 0o755, data) })
	}
	add(strings.TrimPrefix(entry, "/"), bin)
	for _, in := range slices.Sorted(maps.Keys(extra)) {
		add(strings.TrimPrefix(in, "/"), extra[in])
	}
	for _, step := range steps {
		if err := step(); err != nil {
			return nil, fmt.Errorf("write the layer: %w", err)
		}
	}
	if err := tw.Close(); err != nil {
		return nil, fmt.Errorf("write the layer: %w", err)
	}
	raw := b.Bytes()
	return tarball.LayerFromOpener(func() (io.ReadCloser, error) { return io.NopCloser(bytes.NewReader(raw)), nil },
		tarball.WithMediaType(types.OCILayer))
}

// WriteArchive writes img as one tar that is an OCI image layout whose
// index names the image (io.containerd.image.name, as ctr images import
// reads it) and a docker save archive (manifest.json with RepoTags).
// name is a reference such as plumbline:dev; a name without a registry is
// recorded as docker.io/library/NAME for containerd, as docker does.
func WriteArchive(w io.Writer, name string, img v1.Image) error {
	full, tag, err := fullName(name)
	if err != nil {
		return err
	}
	manifest, err := img.RawManifest()
	if err != nil {
		return err
	}
	mdigest, err := img.Digest()
	if err != nil {
		return err
	}
	config, err := img.RawConfigFile()
	if err != nil {
		return err
	}
	cdigest, err := img.ConfigName()
	if err != nil {
		return err
	}
	layers, err := img.Layers()
	if err != nil {
		return err
	}
	tw := tar.NewWriter(w)
	put := func(name string, data []byte) error {
		if err := tw.WriteHeader(&tar.Header{Typeflag: tar.TypeReg, Name: name, Mode: 0o644, Size: int64(len(data)), ModTime: epoch}); err != nil {
			return err
		}
		_, err := tw.Write(data)
		return err
	}
	blob := func(h v1.Hash) string { return path.Join("blobs", h.Algorithm, h.Hex) }
	var layerPaths []string
	for _, l := range layers {
		d, err := l.Digest()
		if err != nil {
			return err
		}
		rc, err := l.Compressed()
		if err != nil {
			return err
		}
		data, err := io.ReadAll(rc)
		rc.Close()
		if err != nil {
			return err
		}
		if err := put(blob(d), data); err != nil {
			return err
		}
		layerPaths = append(layerPaths, blob(d))
	}
	index := map[string]any{
		"schemaVersion": 2,
		"mediaType":     string(types.OCIImageIndex),
		"manifests": []map[string]any{{
			"mediaType": string(types.OCIManifestSchema1),
			"digest":    mdigest.String(),
			"size":      len(manifest),
			"annotations": map[string]string{
				"io.containerd.image.name":          full,
				"org.opencontainers.image.ref.name": tag,
			},
		}},
	}
	indexJSON, err := json.Marshal(index)
	if err != nil {
		return err
	}
	dockerJSON, err := json.Marshal([]map[string]any{{"Config": blob(cdigest), "RepoTags": []string{name}, "Layers": layerPaths}})
	if err != nil {
		return err
	}
	for _, f := range []struct {
		name string
		data []byte
	}{
		{blob(cdigest), config},
		{blob(mdigest), manifest},
		{"oci-layout", []byte(`{"imageLayoutVersion":"1.0.0"}`)},
		{"index.json", indexJSON},
		{"manifest.json", dockerJSON},
	} {
		if err := put(f.name, f.data); err != nil {
			return fmt.Errorf("write %s: %w", f.name, err)
		}
	}
	return tw.Close()
}

// WriteFile builds the image of s and writes its archive, named name, to
// path (whole or not at all), and returns the image's digest.
func WriteFile(path, name string, s Spec) (v1.Hash, error) {
	img, err := Build(s)
	if err != nil {
		return v1.Hash{}, err
	}
	digest, err := img.Digest()
	if err != nil {
		return v1.Hash{}, err
	}
	tmp, err := os.CreateTemp(filepath.Dir(path), ".image-*.tar")
	if err != nil {
		return v1.Hash{}, err
	}
	defer os.Remove(tmp.Name())
	if err := WriteArchive(tmp, name, img); err != nil {
		tmp.Close()
		return v1.Hash{}, fmt.Errorf("write %s: %w", path, err)
	}
	if err := tmp.Close(); err != nil {
		return v1.Hash{}, err
	}
	if err := os.Chmod(tmp.Name(), 0o644); err != nil {
		return v1.Hash{}, err
	}
	return digest, os.Rename(tmp.Name(), path)
}

// fullName is a reference as containerd records it, and its tag.
func fullName(name string) (full, tag string, err error) {
	i := strings.LastIndex(name, ":")
	if i <= 0 || i < strings.LastIndex(name, "/") || i == len(name)-1 {
		return "", "", fmt.Errorf("image name %q: want REPOSITORY:TAG, such as plumbline:dev", name)
	}
	repo, tag := name[:i], name[i+1:]
	first, _, hasSlash := strings.Cut(repo, "/")
	switch {
	case !hasSlash:
		repo = "docker.io/library/" + repo
	case !strings.ContainsAny(first, ".:") && first != "localhost":
		repo = "docker.io/" + repo
	}
	return repo + ":" + tag, tag, nil
}
