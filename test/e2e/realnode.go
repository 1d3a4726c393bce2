package e2e

import (
	"context"
	"fmt"
	"os"
	"path/filepath"

	"plumbline.dev/plumbline/internal/testenv/node"
)

// RealNodePrometheusImage is the name the real node's Prometheus image is
// imported under: made from the prometheus on this machine's PATH.
const RealNodePrometheusImage = "plumbline.local/prometheus:e2e"

// StartRealNode starts this machine's real node (internal/testenv/node)
// with the plumbline image of the checkout at root (named
// DefaultImage, as a user's kind cluster has it after kind load) and a
// Prometheus image imported, in a new directory under the system's
// temporary one, and returns the options that point the suite at it. Stop
// the node, then remove the directory (the second result).
func StartRealNode(ctx context.Context, root, assets string) (*node.Node, string, Options, error) {
	o := Options{RepoRoot: root, Image: DefaultImage, PrometheusImage: RealNodePrometheusImage}
	if err := node.Available(assets); err != nil {
		return nil, "", o, err
	}
	// A short directory: containerd's socket lies in it.
	dir, err := os.MkdirTemp("", "pln-")
	if err != nil {
		return nil, "", o, err
	}
	fail := func(err error) (*node.Node, string, Options, error) {
		_ = os.RemoveAll(dir)
		return nil, "", o, err
	}
	plumbline, err := node.PlumblineImage(ctx, dir, o.Image, "e2e")
	if err != nil {
		return fail(err)
	}
	prom, err := node.PrometheusImage(ctx, dir, o.PrometheusImage)
	if err != nil {
		return fail(err)
	}
	n, err := node.Start(ctx, node.Options{AssetsDir: assets, CRDDir: filepath.Join(root, "config", "crd", "bases"),
		WorkDir: filepath.Join(dir, "node"), Images: []string{plumbline, prom}})
	if err != nil {
		return fail(fmt.Errorf("start the real node: %w", err))
	}
	o.Kubeconfig = n.KubeconfigPath
	o.SharedPath = filepath.Join(dir, "shared")
	return n, dir, o, nil
}
