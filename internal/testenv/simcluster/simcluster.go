// Package simcluster starts a simulated Kubernetes cluster on loopback: the
// real kube-apiserver and etcd (through internal/controlplane), the real
// kube-controller-manager and kube-scheduler, and nodes simulated by kwok
// (sigs.k8s.io/kwok), all built from source by hack/build-controlplane.sh.
// Deployments roll out, Jobs retry and complete, and garbage collection runs
// for real; only containers do not run: kwok marks pods Running, and a Job
// pod finishes when something (the demo's executor) annotates it with an
// exit code and a termination message, which kwok's plumbline-pod-finish
// stage (stages.yaml) turns into the container's terminated state.
package simcluster

import (
	"context"
	_ "embed"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"time"

	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/util/wait"
	"k8s.io/client-go/kubernetes"
	"k8s.io/client-go/rest"

	"plumbline.dev/plumbline/internal/testenv/controlplane"
	"plumbline.dev/plumbline/internal/testenv/proc"
)

//go:embed stages.yaml
var stages []byte

// The annotations an executor sets on a pod it has run.
const (
	ExitCodeAnnotation = "demo.plumbline.dev/exit-code"
	MessageAnnotation  = "demo.plumbline.dev/message"
)

// Options say where the binaries are and where the cluster keeps its files.
type Options struct {
	// AssetsDir holds etcd, kube-apiserver, kube-controller-manager,
	// kube-scheduler and kwok.
	AssetsDir string
	// CRDDir holds CRD manifests to install.
	CRDDir string
	// WorkDir receives the kubeconfig, the stages and the components' logs.
	WorkDir string
	// Nodes is how many kwok nodes to create; zero means one.
	Nodes int
}

// Cluster is a running simulated cluster.
type Cluster struct {
	// Config talks to the API server as an administrator.
	Config *rest.Config
	// KubeconfigPath is the admin kubeconfig, for kubectl.
	KubeconfigPath string
	env            *controlplane.Env
	procs          []*proc.Proc
}

// AssetsDir is where the binaries are for a checkout at root:
// $KUBEBUILDER_ASSETS when set, else root/bin/k8s (where make builds them).
func AssetsDir(root string) string {
	if a := os.Getenv("KUBEBUILDER_ASSETS"); a != "" {
		return a
	}
	return filepath.Join(root, "bin", "k8s")
}

// ErrNoBinaries means a component is not built.
var ErrNoBinaries = errors.New("the simulated cluster's binaries are not built")

// Start starts the cluster and waits until its nodes are Ready; about ten
// seconds.
func Start(ctx context.Context, o Options) (*Cluster, error) {
	for _, b := range []string{"kube-controller-manager", "kube-scheduler", "kwok"} {
		if _, err := os.Stat(filepath.Join(o.AssetsDir, b)); err != nil {
			return nil, fmt.Errorf("%w: %s not found in %q (run 'make simcluster')", ErrNoBinaries, b, o.AssetsDir)
		}
	}
	if o.Nodes == 0 {
		o.Nodes = 1
	}
	if err := os.MkdirAll(o.WorkDir, 0o755); err != nil {
		return nil, fmt.Errorf("create %s: %w", o.WorkDir, err)
	}
	kc := filepath.Join(o.WorkDir, "kubeconfig")
	env, err := controlplane.Start(controlplane.Options{AssetsDir: o.AssetsDir, CRDDir: o.CRDDir, KubeconfigPath: kc})
	if err != nil {
		return nil, err
	}
	c := &Cluster{Config: env.Config, KubeconfigPath: kc, env: env}
	stagesPath := filepath.Join(o.WorkDir, "kwok-stages.yaml")
	if err := os.WriteFile(stagesPath, stages, 0o644); err != nil {
		_ = c.Stop()
		return nil, fmt.Errorf("write kwok stages: %w", err)
	}
	auth := []string{"--kubeconfig=" + kc, "--authentication-kubeconfig=" + kc, "--authorization-kubeconfig=" + kc,
		"--leader-elect=false", "--secure-port=0"}
	components := []struct {
		name string
		args []string
	}{
		// The service-account token controller needs a signing key the
		// demo does not need: pods here run no code that calls the API.
		{"kube-controller-manager", append(auth, "--controllers=*,-serviceaccount-token")},
		{"kube-scheduler", auth},
		// kwok renews each node's lease, as a kubelet does, so the node
		// lifecycle controller keeps the nodes (and their pods) Ready.
		{"kwok", []string{"--kubeconfig=" + kc, "--manage-all-nodes=true", "--config=" + stagesPath, "--node-lease-duration-seconds=40"}},
	}
	for _, comp := range components {
		if err := c.run(o, comp.name, comp.args); err != nil {
			_ = c.Stop()
			return nil, err
		}
	}
	if err := c.addNodes(ctx, o.Nodes); err != nil {
		_ = c.Stop()
		return nil, err
	}
	return c, nil
}

func (c *Cluster) run(o Options, name string, args []string) error {
	p, err := proc.Start(filepath.Join(o.AssetsDir, name), args, filepath.Join(o.WorkDir, name+".log"))
	if err != nil {
		return err
	}
	c.procs = append(c.procs, p)
	return nil
}

// addNodes creates kwok's nodes and waits until every one is Ready, and the
// namespace default has its service account (pods need it to be admitted).
func (c *Cluster) addNodes(ctx context.Context, n int) error {
	cs, err := kubernetes.NewForConfig(c.Config)
	if err != nil {
		return fmt.Errorf("create clientset: %w", err)
	}
	for i := 0; i < n; i++ {
		node := &corev1.Node{ObjectMeta: metav1.ObjectMeta{
			Name:        fmt.Sprintf("kwok-node-%d", i),
			Annotations: map[string]string{"kwok.x-k8s.io/node": "fake"},
			Labels:      map[string]string{"type": "kwok", "kubernetes.io/hostname": fmt.Sprintf("kwok-node-%d", i)},
		}}
		if _, err := cs.CoreV1().Nodes().Create(ctx, node, metav1.CreateOptions{}); err != nil {
			return fmt.Errorf("create node %s: %w", node.Name, err)
		}
	}
	err = wait.PollUntilContextTimeout(ctx, 200*time.Millisecond, 2*time.Minute, true, func(ctx context.Context) (bool, error) {
		nodes, err := cs.CoreV1().Nodes().List(ctx, metav1.ListOptions{})
		if err != nil {
			return false, nil
		}
		ready := 0
		for _, nd := range nodes.Items {
			for _, cond := range nd.Status.Conditions {
				if cond.Type == corev1.NodeReady && cond.Status == corev1.ConditionTrue {
					ready++
				}
			}
		}
		if ready < n {
			return false, nil
		}
		_, err = cs.CoreV1().ServiceAccounts("default").Get(ctx, "default", metav1.GetOptions{})
		return err == nil, nil
	})
	if err != nil {
		return fmt.Errorf("wait for %d kwok nodes to be Ready and the controller manager to create service accounts (logs in the work directory): %w", n, err)
	}
	return nil
}

// Stop stops kwok, the scheduler, the controller manager, then the API
// server and etcd.
func (c *Cluster) Stop() error {
	var errs []error
	for i := len(c.procs) - 1; i >= 0; i-- {
		c.procs[i].Stop(10 * time.Second)
	}
	c.procs = nil
	if c.env != nil {
		if err := c.env.Stop(); err != nil {
			errs = append(errs, err)
		}
		c.env = nil
	}
	return errors.Join(errs...)
}
