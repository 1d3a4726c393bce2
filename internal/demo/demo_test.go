package demo

import (
	"bytes"
	"context"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"plumbline.dev/plumbline/internal/controlplane"
)

// The demo runs start to end on a real control plane and tells the story it
// promises. It is the CI check of the README's first command.
func TestDemoRuns(t *testing.T) {
	if testing.Short() {
		t.Skip("needs a control plane")
	}
	root, err := filepath.Abs("../..")
	if err != nil {
		t.Fatal(err)
	}
	assets := os.Getenv("KUBEBUILDER_ASSETS")
	if assets == "" {
		assets = filepath.Join(root, "bin", "k8s")
	}
	var out bytes.Buffer
	ctx, cancel := context.WithTimeout(context.Background(), 3*time.Minute)
	defer cancel()
	err = Run(ctx, Options{
		CRDDir:     filepath.Join(root, "config", "crd", "bases"),
		SamplesDir: filepath.Join(root, "config", "samples"),
		AssetsDir:  assets,
		WorkDir:    t.TempDir(),
	}, &out)
	if errors.Is(err, controlplane.ErrNoBinaries) && os.Getenv("PLUMBLINE_REQUIRE_ENVTEST") == "" {
		t.Skip(err)
	}
	if err != nil {
		t.Fatalf("demo failed: %v\n%s", err, out.String())
	}
	for _, want := range []string{
		"fictional courier", "synthetic",
		"export KUBECONFIG=",
		"Ready=False (ServingNotFound)",
		"spec.triggers[0]: Invalid value: forSeconds must be at least everySeconds",
		"event Warning InvalidSpec ModelLine/late-risk: spec.schedule.cron:",
		"Ready=True (SpecValid)",
		"2 versions belong to line late-risk",
		"ModelVersion late-risk-v0 is now Live",
		"trigger auc-drop is Pending: below 0.78 since 2026-11-03T02:",
		"event Warning TriggerFiring ModelLine/late-risk: trigger auc-drop is Firing",
		"event Warning RetrainBlocked ModelLine/late-risk: retrain for Trigger/auc-drop: data-quality check address-missing is 0.22",
		"event Normal RetrainStarted ModelLine/late-risk: Trigger/auc-drop: created version late-risk-v1",
		"ModelVersion late-risk-v1 is now Live",
		"trigger auc-drop is Inactive: latest value 0.83",
		"event Normal RetrainStarted ModelLine/late-risk: Manual: created version late-risk-v2",
		"event Normal Archived ModelVersion/late-risk-v0: replaced by late-risk-v1",
		`event Warning GateFailed ModelLine/late-risk: version late-risk-v2 rejected, live version unchanged`,
		`recall/segment "harbour": lower bound of the change in recall`,
		"evaluation Job late-risk-v1-gate ran plumbline evaluate on a synthetic golden set",
		"ModelVersion late-risk-v2 is now Rejected",
		"event Warning Degraded ModelLine/late-risk: late-risk-v0 regressed in production",
		"so nothing is rolled back automatically",
		"event Warning GuardFiring ModelLine/late-risk: guard on late-risk-v3 is Firing",
		"event Warning RollingBack ModelLine/late-risk: late-risk-v3 regressed in production",
		"event Warning RolledBack ModelLine/late-risk: version late-risk-v1 serves again in place of late-risk-v3, which regressed",
		"late-risk  True   late-risk-v1  late-risk-v3  True (RolledBack)",
		"late-risk-v1     Trained    Trigger/auc-drop  Live      Passed",
		"late-risk-v3     Trained    Manual            Archived  Passed",
		`plumbline_rollbacks_total{line="late-risk",namespace="larkspur",target="previous"} 1`,
		"(plumbline.dev/version=late-risk-v1)",
		`plumbline_line_condition{condition="Ready",line="late-risk",namespace="larkspur"} 1`,
		`plumbline_live_version_info{line="late-risk",namespace="larkspur",source="Trained",version="late-risk-v1"} 1`,
		"Stopping the manager and the control plane.",
	} {
		if !strings.Contains(out.String(), want) {
			t.Errorf("demo output lacks %q", want)
		}
	}
	if t.Failed() {
		t.Log(out.String())
	}
}
