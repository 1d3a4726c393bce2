// Package integration runs plumbline against a real kube-apiserver and etcd
// (built from source by hack/build-controlplane.sh) with the real CRDs, so
// their schemas and CEL rules are tested as a cluster applies them, and with
// the manager running as it does in a cluster.
//
// There is no kubelet or kube-controller-manager here: tests that need a
// Deployment's or a Job's status set it themselves, and say so.
package integration

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/client-go/rest"
	clocktesting "k8s.io/utils/clock/testing"
	ctrl "sigs.k8s.io/controller-runtime"
	"sigs.k8s.io/controller-runtime/pkg/cache"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/log/zap"

	"plumbline.dev/plumbline/controllers/modelline"
	"plumbline.dev/plumbline/internal/engine/clock"
	"plumbline.dev/plumbline/internal/manager"
	"plumbline.dev/plumbline/internal/testenv/controlplane"
	"plumbline.dev/plumbline/internal/testenv/promserver"
)

var (
	// k8s is an administrator's client of the test API server.
	k8s client.Client
	// clk is the manager's clock; tests read condition times from it.
	clk = clocktesting.NewFakePassiveClock(time.Date(2026, 11, 2, 9, 30, 0, 0, time.UTC))
	// repoRoot is the repository's top directory.
	repoRoot string
	// kubeconfigPath is an admin kubeconfig, for kubectl.
	kubeconfigPath string
	// promServer is the test Prometheus; prometheusURL its address ("" when
	// it is not installed and the trigger tests skip).
	promServer    *promserver.Server
	prometheusURL string
)

func TestMain(m *testing.M) {
	os.Exit(runSuite(m))
}

func runSuite(m *testing.M) int {
	// testing.Short needs the flags parsed before it is called.
	flag.Parse()
	if testing.Short() {
		fmt.Println("integration: skipped in -short mode (needs a control plane)")
		return 0
	}
	root, err := filepath.Abs("../..")
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 1
	}
	repoRoot = root
	assets := os.Getenv("KUBEBUILDER_ASSETS")
	if assets == "" {
		assets = filepath.Join(root, "bin", "k8s")
	}
	tmp, err := os.MkdirTemp("", "plumbline-integration-")
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 1
	}
	defer os.RemoveAll(tmp)
	env, err := controlplane.Start(controlplane.Options{AssetsDir: assets, CRDDir: filepath.Join(root, "config", "crd", "bases"),
		KubeconfigPath: filepath.Join(tmp, "kubeconfig")})
	if errors.Is(err, controlplane.ErrNoBinaries) && os.Getenv("PLUMBLINE_REQUIRE_ENVTEST") == "" {
		// make test and .ci/run set PLUMBLINE_REQUIRE_ENVTEST, so there this
		// is a failure; a bare `go test ./...` on a new checkout skips.
		fmt.Printf("integration: skipped: %v\n", err)
		return 0
	}
	if err != nil {
		fmt.Fprintf(os.Stderr, "integration: %v\n", err)
		return 1
	}
	kubeconfigPath = env.KubeconfigPath
	defer func() {
		if err := env.Stop(); err != nil {
			fmt.Fprintln(os.Stderr, err)
		}
	}()

	scheme, err := manager.Scheme()
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 1
	}
	k8s, err = client.New(env.Config, client.Options{Scheme: scheme})
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 1
	}

	// The manager runs as the ServiceAccount of config/rbac, with only the
	// permissions generated from the RBAC markers: a permission the code
	// needs and the markers lack fails these tests, as it would in a cluster.
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	if err := applyRBAC(ctx, filepath.Join(root, "config", "rbac")); err != nil {
		fmt.Fprintf(os.Stderr, "integration: %v\n", err)
		return 1
	}
	// A real Prometheus with the trigger scenarios' history.
	prom, err := promserver.Start(filepath.Join(tmp, "prometheus"), triggerHistory())
	switch {
	case errors.Is(err, promserver.ErrNotInstalled) && os.Getenv("PLUMBLINE_REQUIRE_ENVTEST") == "":
		fmt.Printf("integration: the trigger tests will skip: %v\n", err)
	case err != nil:
		fmt.Fprintf(os.Stderr, "integration: %v\n", err)
		return 1
	default:
		promServer, prometheusURL = prom, prom.URL
		defer prom.Stop()
	}

	adminConfig = env.Config
	managerConfig = rest.CopyConfig(env.Config)
	managerConfig.Impersonate = rest.ImpersonationConfig{UserName: managerUser}

	ctrl.SetLogger(zap.New(zap.UseDevMode(true), zap.WriteTo(logSink())))
	if err := startManager(); err != nil {
		fmt.Fprintf(os.Stderr, "integration: %v\n", err)
		return 1
	}
	defer func() {
		if err := stopManager(); err != nil {
			fmt.Fprintf(os.Stderr, "integration: manager: %v\n", err)
		}
	}()

	return m.Run()
}

// prometheusTimeout bounds each of the manager's queries: short, so the
// test of a hung Prometheus does not wait out the default 10 s.
const prometheusTimeout = 3 * time.Second

// managerConfig talks to the API server as the manager's ServiceAccount;
// adminConfig as the test's administrator.
var managerConfig, adminConfig *rest.Config

// running is the manager the tests run against.
var running struct {
	cancel context.CancelFunc
	done   chan error
	// cache is the running manager's cache, for tests of what it holds.
	cache cache.Cache
}

// managerWrap, when set, wraps the client of every manager started: the
// fault-injection test sets it.
var managerWrap func(client.Client) client.Client

// startManager starts a manager as plumbline manager would.
func startManager() error {
	ctx, cancel := context.WithCancel(context.Background())
	mgr, err := manager.New(ctx, managerConfig, manager.Options{MetricsAddr: "0", ProbeAddr: "0", Clock: clock.Manual{PassiveClock: clk},
		AllowSecondManager: true, PrometheusURL: prometheusURL, PrometheusTimeout: prometheusTimeout, WrapClient: managerWrap,
		// The tests read the per-line counters.
		LineMetrics: modelline.LineMetricsAll,
		// The tests step a manual clock by whole intervals.
		UnspreadEvaluations: true})
	if err != nil {
		cancel()
		return err
	}
	running.cancel, running.done, running.cache = cancel, make(chan error, 1), mgr.GetCache()
	go func() { running.done <- mgr.Start(ctx) }()
	return nil
}

// stopManager stops the running manager and waits for it to end.
func stopManager() error {
	if running.cancel == nil {
		return nil
	}
	running.cancel()
	err := <-running.done
	running.cancel = nil
	return err
}

// restartManager stops the manager and starts a new one, as a crash and a
// new Pod would: nothing survives but what is in the API server.
func restartManager(t *testing.T) {
	t.Helper()
	if err := stopManager(); err != nil {
		t.Fatalf("stop manager: %v", err)
	}
	if err := startManager(); err != nil {
		t.Fatalf("start manager: %v", err)
	}
}

// managerUser is the identity of the manager's ServiceAccount in config/rbac.
const managerUser = "system:serviceaccount:plumbline-system:plumbline-manager"

// applyRBAC creates the manager's namespace and every object in config/rbac.
func applyRBAC(ctx context.Context, dir string) error {
	ns := &corev1.Namespace{ObjectMeta: metav1.ObjectMeta{Name: "plumbline-system"}}
	if err := k8s.Create(ctx, ns); err != nil {
		return fmt.Errorf("create namespace plumbline-system: %w", err)
	}
	entries, err := os.ReadDir(dir)
	if err != nil {
		return err
	}
	n := 0
	for _, e := range entries {
		if e.Name() == "kustomization.yaml" || !strings.HasSuffix(e.Name(), ".yaml") {
			continue
		}
		objs, err := decodeManifests(filepath.Join(dir, e.Name()))
		if err != nil {
			return err
		}
		for _, o := range objs {
			if err := k8s.Create(ctx, o); err != nil {
				return fmt.Errorf("create %s %s from %s: %w", o.GetKind(), o.GetName(), e.Name(), err)
			}
			n++
		}
	}
	if n < 4 {
		return fmt.Errorf("config/rbac holds %d objects; want the ServiceAccount, ClusterRole and the bindings", n)
	}
	return nil
}

// logSink keeps the manager's log out of the test output unless
// PLUMBLINE_TEST_LOG names a file for it.
func logSink() *os.File {
	if p := os.Getenv("PLUMBLINE_TEST_LOG"); p != "" {
		if f, err := os.Create(p); err == nil {
			return f
		}
	}
	f, err := os.Open(os.DevNull)
	if err != nil {
		return os.Stderr
	}
	return f
}

// eventually polls f until it returns nil or the timeout passes.
func eventually(t *testing.T, timeout time.Duration, f func() error) {
	t.Helper()
	deadline := time.Now().Add(timeout)
	var err error
	for {
		if err = f(); err == nil {
			return
		}
		if time.Now().After(deadline) {
			t.Fatalf("after %s: %v", timeout, err)
		}
		time.Sleep(100 * time.Millisecond)
	}
}

// mustContain fails unless s holds every one of wants.
func mustContain(t *testing.T, what, s string, wants ...string) {
	t.Helper()
	for _, w := range wants {
		if !strings.Contains(s, w) {
			t.Errorf("%s %q does not contain %q", what, s, w)
		}
	}
}
