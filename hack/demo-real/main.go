// Command demo-real plays the Larkspur Parcels story (synthetic data) of
// make demo on this machine's real node instead of the simulated cluster:
// a real kubelet on containerd runs the plumbline image's pods, the
// manager runs in a pod under its own ServiceAccount, and a Prometheus pod
// scrapes the scorer's pods (make demo-real; needs root). It is the
// end-to-end suite of test/e2e with its timeline on the terminal.
package main

import (
	"context"
	"flag"
	"fmt"
	"os"
	"os/signal"
	"path/filepath"
	"syscall"
	"time"

	"plumbline.dev/plumbline/test/e2e"
)

func main() {
	assets := flag.String("assets", "bin/k8s", "directory holding etcd, kube-apiserver, kube-controller-manager, kube-scheduler, kubelet and kube-proxy (make node builds them)")
	step := flag.Duration("step-timeout", 4*time.Minute, "how long to wait for each step of the story")
	flag.Parse()
	if err := run(*assets, *step); err != nil {
		fmt.Fprintf(os.Stderr, "demo-real: %v\n", err)
		os.Exit(1)
	}
}

func run(assets string, step time.Duration) error {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	root, err := os.Getwd()
	if err != nil {
		return err
	}
	if assets, err = filepath.Abs(assets); err != nil {
		return err
	}
	fmt.Println("Starting a real node on this machine: etcd, kube-apiserver, kube-controller-manager, kube-scheduler,")
	fmt.Println("kube-proxy and a kubelet on containerd, with the plumbline image built from this checkout ...")
	start := time.Now()
	n, dir, o, err := e2e.StartRealNode(ctx, root, assets)
	if err != nil {
		return err
	}
	defer func() {
		fmt.Println("Stopping the node and removing what it made on this machine.")
		n.Stop()
		_ = os.RemoveAll(dir)
	}()
	fmt.Printf("Node Ready in %s. To watch along in another terminal:\n\n    export KUBECONFIG=%s\n    kubectl get modellines,modelversions,jobs,pods -n larkspur -w\n\n",
		time.Since(start).Round(100*time.Millisecond), o.Kubeconfig)
	o.Out, o.StepTimeout = os.Stdout, step
	res, err := e2e.Run(ctx, o)
	if err != nil {
		return err
	}
	fmt.Printf("\nThe story in short: promoted %v, refused %v, rolled back %v; %s serves. It took %s.\n",
		res.Promoted, res.Rejected, res.RolledBack, res.Live, res.Timings["whole story"].Round(time.Second))
	return nil
}
