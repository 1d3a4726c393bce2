package e2e

import (
	"context"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"testing"
	"time"

	corev1 "k8s.io/api/core/v1"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/testenv/node"
)

// The Larkspur story with real containers. With PLUMBLINE_E2E_KUBECONFIG
// set it runs on that cluster (kind, in a user's CI: docs/e2e.md), with
// PLUMBLINE_E2E_IMAGE (default plumbline:dev) and
// PLUMBLINE_E2E_PROMETHEUS_IMAGE already loaded or pullable. Otherwise it
// starts this machine's real node (internal/testenv/node: root, Debian's
// containerd, runc and CNI plugins, the kubelet built by make node),
// imports the plumbline image of this checkout and a Prometheus image made
// from the prometheus on the PATH, and runs there; make test requires that
// (PLUMBLINE_REQUIRE_NODE=1), elsewhere it is skipped with the reason.
func TestStory(t *testing.T) {
	if testing.Short() {
		t.Skip("plays the story on a real cluster")
	}
	root, err := filepath.Abs(filepath.Join("..", ".."))
	if err != nil {
		t.Fatal(err)
	}
	o := Options{RepoRoot: root, Out: testWriter{t}, Image: envOr("PLUMBLINE_E2E_IMAGE", DefaultImage),
		PrometheusImage: envOr("PLUMBLINE_E2E_PROMETHEUS_IMAGE", DefaultPrometheusImage), SharedPath: DefaultSharedPath}
	if v := os.Getenv("PLUMBLINE_E2E_STEP_TIMEOUT"); v != "" {
		if o.StepTimeout, err = time.ParseDuration(v); err != nil {
			t.Fatalf("PLUMBLINE_E2E_STEP_TIMEOUT: %v", err)
		}
	}
	ctx, cancel := context.WithTimeout(context.Background(), 40*time.Minute)
	defer cancel()

	var n *node.Node
	if kc := os.Getenv("PLUMBLINE_E2E_KUBECONFIG"); kc != "" {
		o.Kubeconfig = kc
	} else {
		n = startNode(ctx, t, root, &o)
	}
	res, err := Run(ctx, o)
	if n != nil {
		for _, k := range []string{"whole start", "containerd and images", "kubelet to node Ready"} {
			t.Logf("figure: node %s %s", k, n.Timings[k].Round(100*time.Millisecond))
		}
	}
	if res != nil {
		for k, v := range res.Timings {
			t.Logf("figure: %s %s", k, v.Round(100*time.Millisecond))
		}
		logJobFigures(t, res)
	}
	if err != nil {
		t.Fatal(err)
	}

	if !res.Blocked {
		t.Error("the retrain on the broken feed was not Blocked for DataQualityIssue")
	}
	if len(res.Promoted) != 4 || res.Promoted[0] != "late-risk-v0" || res.Promoted[1] != "late-risk-v1" || res.Promoted[3] != "late-risk-v1" {
		t.Errorf("promotions: %v; want v0, v1, the peak's version, v1 again", res.Promoted)
	}
	peak := res.Promoted[2]
	if !slices.Equal(res.RolledBack, []string{peak}) || res.Live != "late-risk-v1" {
		t.Errorf("rolled back %v, live %s; want %s rolled back to late-risk-v1", res.RolledBack, res.Live, peak)
	}
	// The gate's judgements came from the reports the evaluate containers
	// wrote to /dev/termination-log, which the kubelet passed on.
	for _, v := range []string{"late-risk-v1", peak} {
		g := res.Gates[v]
		if g == nil || g.Verdict != v1alpha1.GatePassed || g.Rows < 1000 || len(g.Criteria) == 0 {
			t.Errorf("gate on %s: %+v; want Passed on the golden set with its criteria", v, g)
		}
	}
	if g := res.Gates["late-risk-vendor"]; g == nil || g.Verdict != v1alpha1.GateFailed || g.Reason != "CriteriaNotMet" || g.Rows < 1000 {
		t.Errorf("gate on the vendor's model: %+v; want Failed (CriteriaNotMet) on the golden set", g)
	}
	roles := map[string]int{}
	for name, j := range res.Jobs {
		if j.Succeeded {
			roles[j.Role]++
		}
		if j.Succeeded && j.Took <= 0 {
			t.Errorf("Job %s succeeded but has no start and completion time: %+v", name, j)
		}
	}
	for _, role := range []string{"train", "gate", "check"} {
		if roles[role] == 0 {
			t.Errorf("no %s Job succeeded: %+v", role, res.Jobs)
		}
	}
	for _, v := range []string{"late-risk-v0", "late-risk-v1", peak} {
		if !slices.Contains(res.ScrapedVersions, v) {
			t.Errorf("Prometheus never scraped a scorer pod serving %s (saw %v)", v, res.ScrapedVersions)
		}
	}
	if res.ManagerSeries == 0 {
		t.Error("Prometheus scraped no plumbline_line_condition_since_timestamp_seconds series from the manager's pod")
	}
	if n != nil {
		managerRunsAsItself(ctx, t, n)
	}
}

// startNode starts the real node, or skips (fails, where it is required)
// when the machine cannot run it.
func startNode(ctx context.Context, t *testing.T, root string, o *Options) *node.Node {
	t.Helper()
	assets := os.Getenv("KUBEBUILDER_ASSETS")
	if assets == "" {
		assets = filepath.Join(root, "bin", "k8s")
	}
	if err := node.Available(assets); err != nil {
		if os.Getenv("PLUMBLINE_REQUIRE_NODE") != "" {
			t.Fatalf("PLUMBLINE_REQUIRE_NODE is set: %v", err)
		}
		t.Skip(err)
	}
	n, dir, no, err := StartRealNode(ctx, root, assets)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		n.Stop()
		_ = os.RemoveAll(dir)
	})
	o.Kubeconfig, o.Image, o.PrometheusImage, o.SharedPath = no.Kubeconfig, no.Image, no.PrometheusImage, no.SharedPath
	return n
}

// managerRunsAsItself checks the manager's pod: its own ServiceAccount,
// not root.
func managerRunsAsItself(ctx context.Context, t *testing.T, n *node.Node) {
	t.Helper()
	c, err := client.New(n.Config, client.Options{})
	if err != nil {
		t.Fatal(err)
	}
	var pods corev1.PodList
	if err := c.List(ctx, &pods, client.InNamespace("plumbline-system"), client.MatchingLabels{"app.kubernetes.io/component": "manager"}); err != nil || len(pods.Items) == 0 {
		t.Fatalf("the manager's pods: %v", err)
	}
	p := pods.Items[0]
	if p.Spec.ServiceAccountName != "plumbline-manager" || p.Spec.SecurityContext == nil || p.Spec.SecurityContext.RunAsNonRoot == nil || !*p.Spec.SecurityContext.RunAsNonRoot {
		t.Errorf("the manager's pod: ServiceAccount %q, security context %+v", p.Spec.ServiceAccountName, p.Spec.SecurityContext)
	}
	for _, cs := range p.Status.ContainerStatuses {
		if cs.RestartCount > 0 {
			t.Errorf("the manager's container restarted %d times", cs.RestartCount)
		}
	}
}

// logJobFigures prints how long the line's Jobs took, by role.
func logJobFigures(t *testing.T, res *Result) {
	byRole := map[string][]time.Duration{}
	for _, j := range res.Jobs {
		if j.Took > 0 {
			byRole[j.Role] = append(byRole[j.Role], j.Took)
		}
	}
	for role, ds := range byRole {
		sort.Slice(ds, func(i, j int) bool { return ds[i] < ds[j] })
		t.Logf("figure: %d %s Job(s), start to completion: min %s, median %s, max %s", len(ds), role, ds[0], ds[len(ds)/2], ds[len(ds)-1])
	}
}

func envOr(name, def string) string {
	if v := os.Getenv(name); v != "" {
		return v
	}
	return def
}

// testWriter sends the timeline to the test's log.
type testWriter struct{ t *testing.T }

func (w testWriter) Write(p []byte) (int, error) {
	w.t.Log(string(p))
	return len(p), nil
}
