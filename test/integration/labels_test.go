package integration

import (
	"context"
	"fmt"
	"strings"
	"testing"
	"time"

	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/testenv/promserver"
)

// The late-label scenarios. Larkspur learns whether a parcel was late only
// when it is delivered: in these histories two hours after the prediction.
func init() {
	// Stamped at prediction time: the point at 03:00 scores the predictions
	// of 03:00, whose labels were in by 05:00. Quality drops at 03:00.
	scenarios["late-labels"] = scenario{auc: dropAt(hm(3, 0), 0.72), missing: constant(0.01), psi: step(hm(3, 0), 0.05, 0.4), labelled: constant(50000)}
	// The same drop while the label feed stalls: few labelled deliveries
	// from 03:30 to 04:30.
	scenarios["label-count"] = scenario{auc: dropAt(hm(3, 0), 0.72), missing: constant(0.01), psi: step(hm(3, 0), 0.05, 0.4),
		labelled: func(t time.Time) float64 {
			if !t.Before(hm(3, 30)) && t.Before(hm(4, 30)) {
				return 3000
			}
			return 50000
		}}
	// Stamped when scored: the production quality an evaluator exports as
	// deliveries come in. From 06:00 to 08:00 it scores the predictions of
	// 04:00 to 06:00, the old version's, which had gone bad: the reason it
	// was replaced at 06:00. From 08:00 the labels coming in are the new,
	// good version's.
	scenarios["guard-labels"] = guardScenario([2]time.Time{hm(6, 0), hm(8, 0)})
	// The new depot's opening week: its parcels shift the depot feature
	// from 03:00 to 05:00, while quality holds as far as labels tell.
	scenarios["early-warning"] = scenario{auc: healthy, missing: constant(0.01), labelled: constant(50000),
		psi: func(t time.Time) float64 {
			if !t.Before(hm(3, 0)) && t.Before(hm(5, 0)) {
				return 0.4
			}
			return 0.05
		}}
	// The depot opens for good at 03:00; quality, as far as labels tell,
	// holds.
	scenarios["early-retrain"] = scenario{auc: healthy, missing: constant(0.01), labelled: constant(50000), psi: step(hm(3, 0), 0.05, 0.4)}
	// Heavier parcels too, from 03:30 to 05:00.
	weight := promserver.Series{Name: "larkspur_feature_psi", Labels: map[string]string{"scenario": "early-warning", "feature": "weight_kg"}}
	for t := day0; t.Before(day0.Add(12 * time.Hour)); t = t.Add(time.Minute) {
		v := 0.05
		if !t.Before(hm(3, 30)) && t.Before(hm(5, 0)) {
			v = 0.35
		}
		weight.Samples = append(weight.Samples, promserver.Sample{T: t, V: v})
	}
	extraHistory = append(extraHistory, weight)
}

// A drop in quality that only has its labels two hours later is caught two
// hours later than it would be with labels at once (the "sustained" line
// fires at 04:00): the window ends two hours ago, so it judges only
// predictions whose labels are in, and says which.
func TestLabelDelayMovesTheWindow(t *testing.T) {
	key := watchedLine(t, "late-labels", func(o *unstructured.Unstructured) {
		mustSet(t, o, "spec.labels", map[string]any{"delaySeconds": int64(7200)})
	})
	// At 04:30 the labels of 02:30's predictions are the latest in: healthy.
	st := stateAt(t, key, hm(4, 30), v1alpha1.TriggerInactive)
	mustContain(t, "message", st.Message, "predictions of 2026-11-02 01:30 to 02:30 UTC")
	// At 05:59 the window (02:59 to 03:59) has the drop but for its first
	// point.
	st = stateAt(t, key, hm(5, 59), v1alpha1.TriggerPending)
	mustContain(t, "message", st.Message, "predictions of 2026-11-02 02:59 to 03:59 UTC")
	// At 06:00 the whole hour of labelled predictions from 03:00 is below.
	st = stateAt(t, key, hm(6, 0), v1alpha1.TriggerFiring)
	mustContain(t, "message", st.Message, "predictions of 2026-11-02 03:00 to 04:00 UTC", "below 0.78 at all 61 points")
	if !st.Since.Time.Equal(hm(3, 0)) {
		t.Errorf("Firing since %s, want the drop's predictions at 03:00", st.Since.Time)
	}
}

// A window with fewer labelled deliveries than the trigger asks is
// Unknown, whatever its quality says; once the labels are in it is judged.
func TestTooFewLabelsIsUnknown(t *testing.T) {
	key := watchedLine(t, "label-count", func(o *unstructured.Unstructured) {
		mustSet(t, o, "spec.triggers", []any{map[string]any{
			"name": "auc-drop", "query": `larkspur_late_risk_roc_auc{scenario="label-count"}`, "below": 0.78,
			"forSeconds": int64(3600), "everySeconds": int64(60),
			"enoughLabels": map[string]any{"query": `sum(larkspur_labelled_deliveries{scenario="label-count"})`, "atLeast": 20000.0},
		}})
	})
	// 02:30: healthy, with labels enough.
	stateAt(t, key, hm(2, 30), v1alpha1.TriggerInactive)
	// 04:10: an hour below 0.78, on 3,000 labelled deliveries.
	st := stateAt(t, key, hm(4, 10), v1alpha1.TriggerUnknown)
	mustContain(t, "message", st.Message, "only 3000 labelled predictions in the window, 20000 needed (enoughLabels.atLeast)")
	waitEvent(t, key.Namespace, key.Name, "TriggerUnknown")
	// 04:40: the labels are in again, and the window has been below for an
	// hour.
	stateAt(t, key, hm(4, 40), v1alpha1.TriggerFiring)
}

// Right after a good version is promoted, the production quality still
// scores the replaced version's predictions, whose labels are the ones
// coming in, and those are bad. The guard must not roll the good version
// back on them: it waits for a whole window of the new version's own
// labelled predictions, says so, and then finds it healthy.
func TestGuardWaitsForTheNewVersionsLabels(t *testing.T) {
	if prometheusURL == "" {
		t.Skip("prometheus is not installed")
	}
	name := "guard-labels"
	clk.SetTime(hm(0, 30))
	key := liveLine(t, name, func(o *unstructured.Unstructured) {
		mustSet(t, o, "spec.guard", map[string]any{
			"query": fmt.Sprintf(`larkspur_live_auc{scenario=%q}`, name), "below": 0.76,
			"forSeconds": int64(600), "everySeconds": int64(60), "probationSeconds": int64(7200),
		})
		mustSet(t, o, "spec.labels", map[string]any{"delaySeconds": int64(7200), "stampedAt": "Scoring"})
	})
	t.Cleanup(func() {
		line := &v1alpha1.ModelLine{}
		line.Namespace, line.Name = key.Namespace, key.Name
		_ = k8s.Delete(context.Background(), line)
	})
	ns := key.Namespace
	retrainLive(t, key, "good-version", "late-risk-v1", hm(5, 40), hm(6, 0))

	// 06:15 and 07:30: the quality coming in is below 0.76 (the old
	// version's predictions); the guard waits and says why.
	for _, at := range []time.Time{hm(6, 15), hm(7, 30)} {
		line := guardAt(t, key, at)
		if line.Status.Guard.State != v1alpha1.TriggerInactive {
			t.Fatalf("at %s the guard is %s (%s): it judged", at.Format("15:04"), line.Status.Guard.State, line.Status.Guard.Message)
		}
		mustContain(t, "guard message", line.Status.Guard.Message, "waiting for late-risk-v1's own labelled predictions (label delay 2h0m0s; promoted at 2026-11-02T06:00:00Z)",
			"from 2026-11-02T08:10:00Z")
		line = waitLineCondition(t, key, v1alpha1.ConditionDegraded, metav1.ConditionFalse, "AwaitingOwnLabels")
		mustContain(t, "Degraded message", meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionDegraded).Message, "does not name the version")
	}
	settle()
	if v := getVersion(t, ns, "late-risk-v1"); v.Status.Phase != v1alpha1.PhaseLive {
		t.Fatalf("the good version was switched away from: %s (%s)", v.Status.Phase, v.Status.Message)
	}
	if _, v := served(t, ns); v != "late-risk-v1" {
		t.Fatalf("the Deployment serves %s", v)
	}

	// 08:10: a whole window of the new version's labelled predictions.
	line := guardAt(t, key, hm(8, 10))
	if line.Status.Guard.State != v1alpha1.TriggerInactive {
		t.Fatalf("at 08:10 the guard is %s (%s), want Inactive", line.Status.Guard.State, line.Status.Guard.Message)
	}
	// The guard's status holds its state's first message; the condition
	// says what this judgement saw.
	line = waitLineCondition(t, key, v1alpha1.ConditionDegraded, metav1.ConditionFalse, "Healthy")
	mustContain(t, "Degraded message", meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionDegraded).Message,
		"predictions of 2026-11-02 06:00 to 06:10 UTC", "is not below 0.76")
	// Its probation counts from when the first labels could be in: it ends
	// at 10:00, not 08:00.
	if end := line.Spec.ProbationEnd(hm(6, 0)); !end.Equal(hm(10, 0)) {
		t.Errorf("probation ends %s", end)
	}
}

// While the labels of the latest predictions are out, the drift checks run
// on their own interval: the inputs moving raises InputsDrifted and an
// event naming the drifted check, and their settling clears it. Nothing is
// started by it.
func TestEarlyWarning(t *testing.T) {
	key := watchedLine(t, "early-warning", func(o *unstructured.Unstructured) {
		mustSet(t, o, "spec.labels", map[string]any{"delaySeconds": int64(7200)})
		mustSet(t, o, "spec.checks.earlyWarning", map[string]any{"everySeconds": int64(300)})
		mustSet(t, o, "spec.checks.drift", []any{
			map[string]any{"name": "depot-shift", "above": 0.25, "query": `max(larkspur_feature_psi{scenario="early-warning",feature="depot"})`},
			map[string]any{"name": "weight-shift", "above": 0.25, "query": `max(larkspur_feature_psi{scenario="early-warning",feature="weight_kg"})`},
		})
	})
	inputsAt := func(at time.Time, status metav1.ConditionStatus, reason string) *metav1.Condition {
		t.Helper()
		clk.SetTime(at)
		nudge(t, key, at)
		line := waitLineCondition(t, key, v1alpha1.ConditionInputsDrifted, status, reason)
		return meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionInputsDrifted)
	}
	c := inputsAt(hm(2, 0), metav1.ConditionFalse, "InputsSteady")
	mustContain(t, "InputsDrifted message", c.Message, "drift check depot-shift is 0.05")
	c = inputsAt(hm(3, 10), metav1.ConditionTrue, "InputsMoved")
	mustContain(t, "InputsDrifted message", c.Message, "the inputs moved (depot-shift)", "is 0.4",
		"the predictions since 2026-11-02T01:10:00Z is not known yet (label delay 2h0m0s)")
	ev := waitEvent(t, key.Namespace, key.Name, "InputsDrifted")
	if ev.Type != "Warning" || !strings.Contains(ev.Note, "depot-shift") {
		t.Errorf("InputsDrifted event %s %q", ev.Type, ev.Note)
	}
	// Another feature drifts: the condition says so, and so does an event.
	eventually(t, waitFor, func() error {
		clk.SetTime(hm(3, 40))
		nudge(t, key, hm(3, 40))
		c = meta.FindStatusCondition(getLine(t, key).Status.Conditions, v1alpha1.ConditionInputsDrifted)
		if c == nil || !strings.HasPrefix(c.Message, "the inputs moved (depot-shift, weight-shift):") {
			return fmt.Errorf("InputsDrifted %+v", c)
		}
		return nil
	})
	eventually(t, waitFor, func() error {
		for _, e := range eventsFor(t, key.Namespace, key.Name, "InputsDrifted") {
			if strings.Contains(e.Note, "weight-shift") {
				return nil
			}
		}
		return fmt.Errorf("no InputsDrifted event names weight-shift")
	})
	// Drifting inputs alone start no retrain.
	settle()
	if line := getLine(t, key); line.Status.ActiveVersion != "" {
		t.Errorf("the early warning started %s", line.Status.ActiveVersion)
	}
	inputsAt(hm(5, 10), metav1.ConditionFalse, "InputsSteady")
	waitEvent(t, key.Namespace, key.Name, "InputsSteady")
}

// A line that lets its early warning ask for a retrain starts one when the
// inputs drift, through the usual checks, with the cause EarlyWarning; the
// cooldown then holds the next.
func TestEarlyWarningMayRetrain(t *testing.T) {
	key := watchedLine(t, "early-retrain", func(o *unstructured.Unstructured) {
		mustSet(t, o, "spec.labels", map[string]any{"delaySeconds": int64(7200)})
		mustSet(t, o, "spec.checks.earlyWarning", map[string]any{"everySeconds": int64(300), "retrain": true})
	})
	clk.SetTime(hm(2, 0))
	nudge(t, key, hm(2, 0))
	waitLineCondition(t, key, v1alpha1.ConditionInputsDrifted, metav1.ConditionFalse, "InputsSteady")
	if vs := trainedVersions(t, key.Namespace); len(vs) != 0 {
		t.Fatalf("a retrain before the inputs drifted: %s", vs[0].Name)
	}
	clk.SetTime(hm(3, 10))
	nudge(t, key, hm(3, 10))
	waitLineCondition(t, key, v1alpha1.ConditionInputsDrifted, metav1.ConditionTrue, "InputsMoved")
	v := waitPhase(t, key.Namespace, "late-risk-v1", v1alpha1.PhaseTraining)
	if v.Spec.Cause != v1alpha1.ReasonEarlyWarning {
		t.Errorf("cause %q, want EarlyWarning", v.Spec.Cause)
	}
	line := waitLineCondition(t, key, v1alpha1.ConditionBlocked, metav1.ConditionFalse, "ChecksPassed")
	mustContain(t, "Blocked message", meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionBlocked).Message, "retrain for EarlyWarning")
	if got := metricSum(t, "plumbline_retrain_decisions_total", map[string]string{"namespace": key.Namespace, "path": "EarlyWarning", "outcome": "Started"}); got != 1 {
		t.Errorf("EarlyWarning starts counted %v, want 1", got)
	}
}
