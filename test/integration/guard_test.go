package integration

import (
	"context"
	"fmt"
	"os/exec"
	"regexp"
	"strings"
	"testing"
	"time"

	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// guardedLine is the Larkspur line of a guard scenario, its imported first
// version live from 00:30: the guard watches the scenario's production ROC
// AUC (below 0.76 for ten minutes, judged every minute, two hours of
// probation). No triggers or checks: retrains are asked for by hand.
func guardedLine(t *testing.T, name string) client.ObjectKey {
	t.Helper()
	if prometheusURL == "" {
		t.Skip("prometheus is not installed")
	}
	clk.SetTime(hm(0, 30))
	key := liveLine(t, name, func(o *unstructured.Unstructured) {
		mustSet(t, o, "spec.guard", map[string]any{
			"query": fmt.Sprintf(`larkspur_live_auc{scenario=%q}`, name), "below": 0.76,
			"forSeconds": int64(600), "everySeconds": int64(60), "probationSeconds": int64(7200),
		})
	})
	t.Cleanup(func() {
		line := &v1alpha1.ModelLine{}
		line.Namespace, line.Name = key.Namespace, key.Name
		_ = k8s.Delete(context.Background(), line)
	})
	return key
}

// guardAt moves the clock, wakes the line and waits for the guard to judge,
// then returns the line.
func guardAt(t *testing.T, key client.ObjectKey, at time.Time) *v1alpha1.ModelLine {
	t.Helper()
	judgedAt(t, key, at, "plumbline_guard_evaluations_total")
	var line *v1alpha1.ModelLine
	eventually(t, waitFor, func() error {
		line = getLine(t, key)
		if line.Status.Guard == nil {
			return fmt.Errorf("no guard status")
		}
		return nil
	})
	return line
}

// waitGuardState waits for the guard's status to show a state.
func waitGuardState(t *testing.T, key client.ObjectKey, want v1alpha1.TriggerState) *v1alpha1.ModelLine {
	t.Helper()
	var line *v1alpha1.ModelLine
	eventually(t, waitFor, func() error {
		line = getLine(t, key)
		if line.Status.Guard == nil || line.Status.Guard.State != want {
			return fmt.Errorf("guard %+v, want %s", line.Status.Guard, want)
		}
		return nil
	})
	return line
}

// A candidate that regresses for ten minutes inside its probation is rolled
// back to the version it replaced, which serves again; the regressed one is
// archived as RolledBack and the line says it fell back.
func TestGuardRollsBackToPrevious(t *testing.T) {
	key := guardedLine(t, "guard-rollback")
	ns := key.Namespace
	// v1 is trained and goes live at 06:00.
	retrainLive(t, key, "before-the-regression", "late-risk-v1", hm(5, 40), hm(6, 0))

	// Until 06:10 the guard only watches; production quality drops at 06:10.
	line := guardAt(t, key, hm(6, 5))
	mustContain(t, "guard message", line.Status.Guard.Message, "watching late-risk-v1", "first full 10m0s window ends at 2026-11-02T06:10:00Z")
	guardAt(t, key, hm(6, 15))
	waitGuardState(t, key, v1alpha1.TriggerPending)
	guardAt(t, key, hm(6, 20))
	line = waitGuardState(t, key, v1alpha1.TriggerFiring)
	if line.Status.Guard.Name != "late-risk-v1" {
		t.Errorf("guard watches %q", line.Status.Guard.Name)
	}
	v0 := waitPhase(t, ns, initial, v1alpha1.PhasePromoting)
	if v0.Status.Promotion == nil || v0.Status.Promotion.Kind != v1alpha1.PromotionRollback || v0.Status.Promotion.FromVersion != "late-risk-v1" {
		t.Fatalf("rollback record %+v", v0.Status.Promotion)
	}
	waitLineCondition(t, key, v1alpha1.ConditionDegraded, metav1.ConditionTrue, "Regressed")
	waitEvent(t, ns, lineName, "RollingBack")
	rollOutTo(t, ns, initial)
	waitPhase(t, ns, initial, v1alpha1.PhaseLive)
	v1 := waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseArchived)
	if v1.Status.Reason != v1alpha1.ReasonRolledBack {
		t.Errorf("regressed version's reason %q, want RolledBack", v1.Status.Reason)
	}
	if err := expectCondition(v1.Status.Conditions, v1alpha1.ConditionLive, metav1.ConditionFalse, v1alpha1.ReasonRolledBack); err != nil {
		t.Error(err)
	}
	if a, v := served(t, ns); a != initialURI || v != initial {
		t.Errorf("Deployment serves %s / %s", a, v)
	}
	line = waitLineCondition(t, key, v1alpha1.ConditionFallbackActive, metav1.ConditionTrue, v1alpha1.ReasonRolledBack)
	if line.Status.LiveVersion != initial || line.Status.PreviousVersion != "late-risk-v1" || line.Status.LastRollbackTime == nil {
		t.Errorf("line status after the rollback: live %s previous %s last rollback %v", line.Status.LiveVersion, line.Status.PreviousVersion, line.Status.LastRollbackTime)
	}
	waitEvent(t, ns, lineName, "RolledBack")
	if got := metricValue(t, "plumbline_rollbacks_total", map[string]string{"namespace": ns, "target": "previous"}); got != 1 {
		t.Errorf("rollbacks to previous %v", got)
	}

	// At a glance: kubectl get shows the fallback.
	if kubectl, err := exec.LookPath("kubectl"); err == nil && kubeconfigPath != "" {
		out, err := exec.Command(kubectl, "--kubeconfig", kubeconfigPath, "get", "modellines,modelversions", "-n", ns).CombinedOutput()
		if err != nil {
			t.Fatalf("kubectl: %v\n%s", err, out)
		}
		t.Logf("after the rollback:\n%s", out)
		if got := tableCell(string(out), "modelline.plumbline.dev/late-risk", "FALLBACK"); got != "True" {
			t.Errorf("kubectl get modellines shows FALLBACK %q, want True:\n%s", got, out)
		}
	}

	// The regression goes on, v0 is live in its own probation: it regressed
	// too (the same series), but the line switched less than a probation ago.
	guardAt(t, key, hm(6, 45))
	line = waitLineCondition(t, key, v1alpha1.ConditionNeedsReview, metav1.ConditionTrue, "RollbackLimit")
	settle()
	if v := getVersion(t, ns, rulesName); v.Status.Phase != v1alpha1.PhaseStandby {
		t.Errorf("a second automatic switch: rules are %s", v.Status.Phase)
	}
	_ = line
	cacheAgrees(t, ns)
}

// With no version before the live one, the line falls back to its
// rule-based version.
func TestGuardFallsBackToRuleBased(t *testing.T) {
	key := guardedLine(t, "guard-rulebased")
	ns := key.Namespace
	guardAt(t, key, hm(1, 5))
	guardAt(t, key, hm(1, 11))
	waitGuardState(t, key, v1alpha1.TriggerFiring)
	rules := waitPhase(t, ns, rulesName, v1alpha1.PhasePromoting)
	if k := rules.Status.Promotion.Kind; k != v1alpha1.PromotionFallback {
		t.Errorf("kind %s", k)
	}
	rollOutTo(t, ns, rulesName)
	waitPhase(t, ns, rulesName, v1alpha1.PhaseLive)
	v0 := waitPhase(t, ns, initial, v1alpha1.PhaseArchived)
	if v0.Status.Reason != v1alpha1.ReasonRolledBack {
		t.Errorf("v0 reason %q", v0.Status.Reason)
	}
	line := waitLineCondition(t, key, v1alpha1.ConditionFallbackActive, metav1.ConditionTrue, "RuleBasedFallback")
	mustContain(t, "FallbackActive message", meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionFallbackActive).Message, "late-risk-rules (Fallback) serves in place of late-risk-v0")
	if a, _ := served(t, ns); a != "s3://larkspur-models/late-risk/rules-2026-09.json" {
		t.Errorf("Deployment serves %s", a)
	}
	if got := metricValue(t, "plumbline_rollbacks_total", map[string]string{"namespace": ns, "target": "rule-based"}); got != 1 {
		t.Errorf("rollbacks to rule-based %v", got)
	}
	waitEvent(t, ns, lineName, "FallbackServing")

	// A new candidate that passes the gate takes over, and the rule-based
	// version goes back into reserve.
	clk.SetTime(hm(1, 30))
	requestRetrain(t, key, "after-fallback")
	trainAndPass(t, ns, "late-risk-v1")
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhasePromoting)
	rollOutTo(t, ns, "late-risk-v1")
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseLive)
	waitPhase(t, ns, rulesName, v1alpha1.PhaseStandby)
	waitLineCondition(t, key, v1alpha1.ConditionFallbackActive, metav1.ConditionFalse, "ServingCandidate")
}

// After probation a regression only degrades the line.
func TestGuardAfterProbationOnlyDegrades(t *testing.T) {
	key := guardedLine(t, "guard-late")
	ns := key.Namespace
	guardAt(t, key, hm(3, 5))
	guardAt(t, key, hm(3, 11))
	line := waitLineCondition(t, key, v1alpha1.ConditionDegraded, metav1.ConditionTrue, "RegressedAfterProbation")
	mustContain(t, "Degraded message", meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionDegraded).Message, "probation ended at 2026-11-02T02:30:00Z")
	ev := waitEvent(t, ns, lineName, "Degraded")
	if ev.Type != "Warning" {
		t.Errorf("event type %s", ev.Type)
	}
	settle()
	if v := getVersion(t, ns, initial); v.Status.Phase != v1alpha1.PhaseLive {
		t.Errorf("v0 is %s", v.Status.Phase)
	}
	if v := getVersion(t, ns, rulesName); v.Status.Phase != v1alpha1.PhaseStandby {
		t.Errorf("rules are %s", v.Status.Phase)
	}
}

// A five-minute dip inside probation does nothing.
func TestGuardShortDipDoesNothing(t *testing.T) {
	key := guardedLine(t, "guard-dip")
	ns := key.Namespace
	guardAt(t, key, hm(1, 3))
	waitGuardState(t, key, v1alpha1.TriggerPending)
	guardAt(t, key, hm(1, 8))
	guardAt(t, key, hm(1, 20))
	waitGuardState(t, key, v1alpha1.TriggerInactive)
	waitLineCondition(t, key, v1alpha1.ConditionDegraded, metav1.ConditionFalse, "Healthy")
	settle()
	if v := getVersion(t, ns, initial); v.Status.Phase != v1alpha1.PhaseLive {
		t.Errorf("v0 is %s after a dip", v.Status.Phase)
	}
}

// Prometheus unreachable during probation: Unknown, nothing done; back, the
// regression is acted on.
func TestGuardPrometheusDown(t *testing.T) {
	key := guardedLine(t, "guard-down")
	ns := key.Namespace
	if err := promServer.Stop(); err != nil {
		t.Fatal(err)
	}
	restarted := false
	defer func() {
		if !restarted {
			_ = promServer.Restart()
		}
	}()
	guardAt(t, key, hm(1, 15))
	line := waitGuardState(t, key, v1alpha1.TriggerUnknown)
	mustContain(t, "guard message", line.Status.Guard.Message, "query failed")
	waitLineCondition(t, key, v1alpha1.ConditionDegraded, metav1.ConditionUnknown, "GuardUnknown")
	settle()
	if v := getVersion(t, ns, rulesName); v.Status.Phase != v1alpha1.PhaseStandby {
		t.Fatalf("acted on Unknown: rules are %s", v.Status.Phase)
	}
	if err := promServer.Restart(); err != nil {
		t.Fatal(err)
	}
	restarted = true
	guardAt(t, key, hm(1, 16))
	waitPhase(t, ns, rulesName, v1alpha1.PhasePromoting)
}

// The manager restarts in the middle of a rollback: the rollback finishes
// once, with one patch of the Deployment.
func TestGuardRollbackSurvivesRestart(t *testing.T) {
	key := guardedLine(t, "guard-restart")
	ns := key.Namespace
	gen := deployment(t, ns).Generation
	guardAt(t, key, hm(1, 5))
	guardAt(t, key, hm(1, 11))
	waitPhase(t, ns, rulesName, v1alpha1.PhasePromoting)
	restartManager(t)
	deploymentGeneration(t, ns, scorer, gen+1)
	restartManager(t)
	settle()
	if g := deployment(t, ns).Generation; g != gen+1 {
		t.Fatalf("generation %d, want one patch (%d)", g, gen+1)
	}
	rollOut(t, ns, scorer)
	restartManager(t)
	waitPhase(t, ns, rulesName, v1alpha1.PhaseLive)
	// The guard keeps firing on the rule-based version (the same series), but
	// the switch happened: no second one.
	guardAt(t, key, hm(1, 40))
	restartManager(t)
	settle()
	if g := deployment(t, ns).Generation; g != gen+1 {
		t.Errorf("generation %d after the rollback", g)
	}
	if got := metricValue(t, "plumbline_rollbacks_total", map[string]string{"namespace": ns}); got != 1 {
		t.Errorf("rollbacks counted %v", got)
	}
}

// A person goes back to a named archived version, through the same path.
func TestManualRollback(t *testing.T) {
	key := guardedLine(t, "guard-manual")
	ns := key.Namespace
	clk.SetTime(hm(2, 0))
	requestRetrain(t, key, "manual-rollback-1")
	trainAndPass(t, ns, "late-risk-v1")
	rollOutTo(t, ns, "late-risk-v1")
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseLive)

	setAnnotation(t, key, v1alpha1.RollbackRequestAnnotation, "late-risk-v9")
	ev := waitEvent(t, ns, lineName, "RollbackRequestInvalid")
	mustContain(t, "event", ev.Note, `the line has no version "late-risk-v9"`)

	setAnnotation(t, key, v1alpha1.RollbackRequestAnnotation, initial)
	v0 := waitPhase(t, ns, initial, v1alpha1.PhasePromoting)
	if v0.Status.Promotion.Kind != v1alpha1.PromotionRequested {
		t.Errorf("kind %s", v0.Status.Promotion.Kind)
	}
	rollOutTo(t, ns, initial)
	waitPhase(t, ns, initial, v1alpha1.PhaseLive)
	v1 := waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseArchived)
	if v1.Status.Reason != "Replaced" {
		t.Errorf("a person's rollback marks the version %q; only the guard marks RolledBack", v1.Status.Reason)
	}
	line := waitLineCondition(t, key, v1alpha1.ConditionFallbackActive, metav1.ConditionTrue, "RequestedRollback")
	if line.Status.LastRollbackRequest != initial {
		t.Errorf("lastRollbackRequest %q", line.Status.LastRollbackRequest)
	}
	waitEvent(t, ns, lineName, "RollbackDone")
	if got := metricValue(t, "plumbline_rollbacks_total", map[string]string{"namespace": ns, "target": "requested"}); got != 1 {
		t.Errorf("requested rollbacks %v", got)
	}
}

func setAnnotation(t *testing.T, key client.ObjectKey, name, value string) {
	t.Helper()
	patch := fmt.Sprintf(`{"metadata":{"annotations":{%q:%q}}}`, name, value)
	line := &v1alpha1.ModelLine{}
	line.Namespace, line.Name = key.Namespace, key.Name
	if err := k8s.Patch(context.Background(), line, client.RawPatch("application/merge-patch+json", []byte(patch))); err != nil {
		t.Fatal(err)
	}
}

// tableCell reads one cell of kubectl's table output: the row whose first
// column is name, under the header column. kubectl aligns every cell with
// the start of its header, so a cell is the text between its header's start
// and the next one's: a header of two words ("AWAITING APPROVAL") stays one,
// and an empty cell is read as "".
func tableCell(out, name, column string) string {
	split := regexp.MustCompile(`\S+( \S+)*`)
	var starts [][]int
	var header []string
	for _, l := range strings.Split(out, "\n") {
		if strings.HasPrefix(l, "NAME ") {
			starts = split.FindAllStringIndex(l, -1)
			header = nil
			for _, s := range starts {
				header = append(header, l[s[0]:s[1]])
			}
			continue
		}
		if header == nil || !strings.HasPrefix(l, name+" ") {
			continue
		}
		for i, h := range header {
			if h != column {
				continue
			}
			from, to := starts[i][0], len(l)
			if i+1 < len(starts) {
				to = min(starts[i+1][0], len(l))
			}
			if from >= len(l) {
				return ""
			}
			return strings.TrimSpace(l[from:to])
		}
	}
	return ""
}
