// Command image writes the plumbline container image as an archive without
// a container engine (make image): an OCI image layout that is also a
// docker save archive, loadable with ctr images import, kind load
// image-archive and docker load. See internal/image.
package main

import (
	"flag"
	"fmt"
	"os"
	"runtime"

	"plumbline.dev/plumbline/internal/image"
)

func main() {
	var s image.Spec
	var name, out string
	flag.StringVar(&s.Binary, "binary", "bin/plumbline-linux", "the static plumbline binary (CGO_ENABLED=0)")
	flag.StringVar(&s.CACerts, "ca-certs", "/etc/ssl/certs/ca-certificates.crt", "a PEM bundle of CA certificates (Debian's ca-certificates package)")
	flag.StringVar(&s.Arch, "arch", runtime.GOARCH, "the binary's GOARCH")
	flag.StringVar(&s.Version, "version", "dev", "the version label")
	flag.StringVar(&name, "name", "plumbline:dev", "the image's name, REPOSITORY:TAG")
	flag.StringVar(&out, "out", "bin/plumbline-image.tar", "the archive to write")
	flag.Parse()
	if err := run(s, name, out); err != nil {
		fmt.Fprintf(os.Stderr, "image: %v\n", err)
		os.Exit(1)
	}
}

func run(s image.Spec, name, out string) error {
	digest, err := image.WriteFile(out, name, s)
	if err != nil {
		return err
	}
	fmt.Printf("%s: %s (%s), load with: ctr -n k8s.io images import %s | kind load image-archive %s | docker load -i %s\n",
		out, name, digest, out, out, out)
	return nil
}
