package demo

import (
	"bytes"
	"context"
	"errors"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"plumbline.dev/plumbline/internal/testenv/controlplane"
	"plumbline.dev/plumbline/internal/testenv/simcluster"
)

// The demo runs start to end on the simulated cluster and tells the story
// it promises. It is the CI check of the README's first command, shortened
// (no opening mistakes, shorter pauses).
func TestDemoRuns(t *testing.T) {
	if testing.Short() {
		t.Skip("needs the simulated cluster")
	}
	root, err := filepath.Abs("../../..")
	if err != nil {
		t.Fatal(err)
	}
	// The Jobs run the plumbline binary, as in make demo.
	bin := filepath.Join(t.TempDir(), "plumbline")
	build := exec.Command("go", "build", "-o", bin, ".")
	build.Dir = root
	if out, err := build.CombinedOutput(); err != nil {
		t.Fatalf("build plumbline: %v\n%s", err, out)
	}
	var out bytes.Buffer
	ctx, cancel := context.WithTimeout(context.Background(), 12*time.Minute)
	defer cancel()
	res, err := Run(ctx, Options{
		CRDDir:    filepath.Join(root, "config", "crd", "bases"),
		AssetsDir: simcluster.AssetsDir(root),
		WorkDir:   t.TempDir(),
		Binary:    bin,
		Short:     true,
	}, &out)
	if (errors.Is(err, simcluster.ErrNoBinaries) || errors.Is(err, controlplane.ErrNoBinaries)) && os.Getenv("PLUMBLINE_REQUIRE_SIMCLUSTER") == "" {
		t.Skip(err)
	}
	if err != nil {
		t.Fatalf("demo failed: %v\n%s", err, out.String())
	}
	if !res.Blocked {
		t.Error("no retrain was refused on broken data")
	}
	if !res.WarnedEarly {
		t.Error("the early warning did not name the peak's drifted input before the quality trigger fired")
	}
	if !res.GuardWaited {
		t.Error("the guard did not wait for the peak version's own outcomes")
	}
	wantPromoted := []string{"late-risk-v0", "late-risk-v1", "late-risk-v2", "late-risk-v1"}
	if !slices.Equal(res.Promoted, wantPromoted) {
		t.Errorf("went live after completed rollouts: %v, want %v", res.Promoted, wantPromoted)
	}
	if !slices.Equal(res.RolledBack, []string{"late-risk-v2"}) {
		t.Errorf("rolled back %v, want [late-risk-v2]", res.RolledBack)
	}
	if res.Live != "late-risk-v1" {
		t.Errorf("live version at the end %q, want late-risk-v1", res.Live)
	}
	for _, j := range []string{"late-risk-v1/train", "late-risk-v1/gate", "late-risk-v2/train", "late-risk-v2/gate"} {
		if res.Jobs[j] != 1 {
			t.Errorf("%d Jobs for %s, want exactly 1", res.Jobs[j], j)
		}
	}
	for j, n := range res.Jobs {
		if n > 1 {
			t.Errorf("%d Jobs for %s: duplicates", n, j)
		}
	}
	for _, j := range []string{"late-risk-check-1", "late-risk-v1-train", "late-risk-v1-gate", "late-risk-check-2", "late-risk-v2-train", "late-risk-v2-gate"} {
		if res.PodRuns[j] < 1 {
			t.Errorf("the executor ran no pod of Job %s", j)
		}
	}
	for _, v := range []string{"late-risk-v0", "late-risk-v1", "late-risk-v2"} {
		if res.ServedBy[v] == 0 {
			t.Errorf("version %s scored no parcels: its rollout never served", v)
		}
	}
	for _, want := range []string{
		"fictional courier", "synthetic",
		"export KUBECONFIG=",
		"event Normal ScalingReplicaSet Deployment/late-risk-scorer",
		"Blocked (DataQualityIssue)",
		"InputsDrifted=True (InputsMoved)",
		"Degraded=False (AwaitingOwnLabels): waiting for late-risk-v2's own labelled predictions",
		"address-missing",
		"event Normal Completed Job/late-risk-v1-train",
		"event Normal CheckFinished ModelLine/late-risk: check Job late-risk-check-1:",
		"data quality ok; drift detected",
		"late-risk  True   late-risk-v1",
		"Stopping the manager, Prometheus and the cluster.",
	} {
		if !strings.Contains(out.String(), want) {
			t.Errorf("demo output lacks %q", want)
		}
	}
	if t.Failed() {
		t.Log(out.String())
	}
}
