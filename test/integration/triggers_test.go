package integration

import (
	"context"
	"fmt"
	"math"
	"strings"
	"testing"
	"time"

	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/metrics"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/testenv/promserver"
)

// The trigger scenarios' history, backfilled into the test Prometheus before
// it starts: twelve hours from day0 at one point a minute, synthetic numbers
// for Larkspur's late-delivery model. Each scenario has its own label, and
// its line queries only its own series.
var day0 = time.Date(2026, 11, 2, 0, 0, 0, 0, time.UTC)

func hm(h, m int) time.Time {
	return day0.Add(time.Duration(h)*time.Hour + time.Duration(m)*time.Minute)
}

// scenario describes one history: the model's ROC AUC, the share of parcels
// with no address confidence, the depot feature's PSI and the labelled rows.
type scenario struct {
	auc, missing, psi, labelled func(t time.Time) float64
	// live is the production quality the guard watches; healthy when nil.
	live func(t time.Time) float64
}

func healthy(t time.Time) float64 {
	// About 0.82 with a little wobble, never near 0.78.
	return 0.82 + 0.008*math.Sin(float64(t.Unix())/420)
}

func dropAt(at time.Time, to float64) func(time.Time) float64 {
	return func(t time.Time) float64 {
		if t.Before(at) {
			return healthy(t)
		}
		return to + 0.005*math.Sin(float64(t.Unix())/300)
	}
}

func step(at time.Time, before, after float64) func(time.Time) float64 {
	return func(t time.Time) float64 {
		if t.Before(at) {
			return before
		}
		return after
	}
}

func constant(v float64) func(time.Time) float64 { return func(time.Time) float64 { return v } }

// noSample, returned by a scenario's function, leaves that minute out of
// the history: the series has a gap.
var noSample = math.Inf(-1)

// guardScenario is a line whose production quality is healthy but for the
// given stretches at 0.70.
func guardScenario(bad ...[2]time.Time) scenario {
	return scenario{auc: healthy, missing: constant(0.01), psi: constant(0.05), labelled: constant(50000),
		live: func(t time.Time) float64 {
			for _, b := range bad {
				if !t.Before(b[0]) && t.Before(b[1]) {
					return 0.70
				}
			}
			return healthy(t)
		}}
}

var scenarios = map[string]scenario{
	// The guard's scenarios: the live version's quality over the day.
	"guard-rollback":  guardScenario([2]time.Time{hm(6, 10), hm(12, 0)}),
	"guard-rulebased": guardScenario([2]time.Time{hm(1, 0), hm(12, 0)}),
	"guard-late":      guardScenario([2]time.Time{hm(3, 0), hm(12, 0)}),
	"guard-dip":       guardScenario([2]time.Time{hm(1, 0), hm(1, 5)}),
	"guard-down":      guardScenario([2]time.Time{hm(1, 0), hm(12, 0)}),
	"guard-restart":   guardScenario([2]time.Time{hm(1, 0), hm(12, 0)}),
	"guard-manual":    guardScenario(),
	// Alternatives: a drop with too few labels to retrain on; a live
	// version degraded after probation.
	"alt-insufficient": {auc: dropAt(hm(3, 0), 0.72), missing: constant(0.01), psi: step(hm(3, 0), 0.05, 0.4), labelled: constant(3000)},
	"alt-manual":       {auc: dropAt(hm(3, 0), 0.72), missing: constant(0.01), psi: step(hm(3, 0), 0.05, 0.4), labelled: constant(3000)},
	"alt-degraded":     guardScenario([2]time.Time{hm(3, 0), hm(12, 0)}),
	// A twenty-minute dip at 03:00: shorter than the one-hour window.
	"dip": {auc: func(t time.Time) float64 {
		if !t.Before(hm(3, 0)) && t.Before(hm(3, 20)) {
			return 0.70
		}
		return healthy(t)
	}, missing: constant(0.01), psi: constant(0.4), labelled: constant(50000)},
	// The new depot opens at 03:00: inputs shift and quality drops for good.
	"sustained":   {auc: dropAt(hm(3, 0), 0.72), missing: constant(0.01), psi: step(hm(3, 0), 0.05, 0.4), labelled: constant(50000)},
	"broken-feed": {auc: dropAt(hm(3, 0), 0.72), missing: step(hm(3, 30), 0.01, 0.18), psi: step(hm(3, 0), 0.05, 0.4), labelled: constant(50000)},
	"no-drift":    {auc: dropAt(hm(3, 0), 0.72), missing: constant(0.01), psi: constant(0.05), labelled: constant(50000)},
	// A drop PromQL sees no drift behind; the check Job decides.
	"check-drift": {auc: dropAt(hm(3, 0), 0.72), missing: constant(0.01), psi: constant(0.05), labelled: constant(50000)},
	// The same drop, with a new version going live in the middle of it.
	"live-too-recent": {auc: dropAt(hm(3, 0), 0.72), missing: constant(0.01), psi: step(hm(3, 0), 0.05, 0.4), labelled: constant(50000)},
	"few-labels":      {auc: dropAt(hm(3, 0), 0.72), missing: constant(0.01), psi: step(hm(3, 0), 0.05, 0.4), labelled: constant(3000)},
	"prom-down":       {auc: dropAt(hm(3, 0), 0.72), missing: constant(0.01), psi: step(hm(3, 0), 0.05, 0.4), labelled: constant(50000)},
	// Healthy throughout: for a person's request.
	"manual-checks": {auc: healthy, missing: constant(0.01), psi: constant(0.05), labelled: constant(50000)},
	// Steady quality and no drift: only the schedule starts retrains.
	"scheduled":        {auc: healthy, missing: constant(0.01), psi: constant(0.05), labelled: constant(50000)},
	"scheduled-broken": {auc: healthy, missing: constant(0.2), psi: constant(0.05), labelled: constant(50000)},
}

func triggerHistory() []promserver.Series {
	var out []promserver.Series
	for name, sc := range scenarios {
		live := sc.live
		if live == nil {
			live = healthy
		}
		for metric, f := range map[string]func(time.Time) float64{
			"larkspur_late_risk_roc_auc":     sc.auc,
			"larkspur_feature_missing_ratio": sc.missing,
			"larkspur_feature_psi":           sc.psi,
			"larkspur_labelled_deliveries":   sc.labelled,
			"larkspur_live_auc":              live,
		} {
			s := promserver.Series{Name: metric, Labels: map[string]string{"scenario": name}}
			switch metric {
			case "larkspur_feature_missing_ratio":
				s.Labels["feature"] = "address_confidence"
			case "larkspur_feature_psi":
				s.Labels["feature"] = "depot"
			}
			for t := day0; t.Before(day0.Add(12 * time.Hour)); t = t.Add(time.Minute) {
				if v := f(t); v != noSample {
					s.Samples = append(s.Samples, promserver.Sample{T: t, V: v})
				}
			}
			out = append(out, s)
		}
	}
	return append(out, extraHistory...)
}

// extraHistory holds series besides the scenarios' five, added by the tests
// that query them.
var extraHistory []promserver.Series

// watchedLine is the Larkspur line of a scenario: one trigger (ROC AUC below
// 0.78 for an hour, judged every minute) and the three checks, each on the
// scenario's own series.
func watchedLine(t *testing.T, name string, extra func(*unstructured.Unstructured)) client.ObjectKey {
	t.Helper()
	if prometheusURL == "" {
		t.Skip("prometheus is not installed")
	}
	clk.SetTime(hm(0, 30))
	sel := fmt.Sprintf(`scenario=%q`, name)
	key := liveLine(t, name, func(o *unstructured.Unstructured) {
		mustSet(t, o, "spec.triggers", []any{map[string]any{
			"name": "auc-drop", "query": "larkspur_late_risk_roc_auc{" + sel + "}", "below": 0.78,
			"forSeconds": int64(3600), "everySeconds": int64(60),
		}})
		mustSet(t, o, "spec.checks", map[string]any{
			"dataQuality": []any{map[string]any{"name": "address-missing", "above": 0.05,
				"query": `max(larkspur_feature_missing_ratio{` + sel + `,feature="address_confidence"})`}},
			"drift": []any{map[string]any{"name": "depot-shift", "above": 0.25,
				"query": `max(larkspur_feature_psi{` + sel + `,feature="depot"})`}},
			"freshData": map[string]any{"query": `sum(larkspur_labelled_deliveries{` + sel + `})`, "atLeast": 20000.0},
		})
		mustSet(t, o, "spec.cooldownSeconds", int64(43200))
		if extra != nil {
			extra(o)
		}
	})
	t.Cleanup(func() {
		// Deleting the line stops its evaluations for the tests after.
		line := &v1alpha1.ModelLine{}
		line.Namespace, line.Name = key.Namespace, key.Name
		_ = k8s.Delete(context.Background(), line)
	})
	return key
}

// metricSum adds up a metric's series that carry the labels.
func metricSum(t *testing.T, name string, labels map[string]string) float64 {
	t.Helper()
	families, err := metrics.Registry.Gather()
	if err != nil {
		t.Fatal(err)
	}
	sum := 0.0
	for _, fam := range families {
		if fam.GetName() != name {
			continue
		}
	next:
		for _, m := range fam.GetMetric() {
			have := map[string]string{}
			for _, l := range m.GetLabel() {
				have[l.GetName()] = l.GetValue()
			}
			for k, v := range labels {
				if have[k] != v {
					continue next
				}
			}
			sum += m.GetCounter().GetValue()
		}
	}
	return sum
}

// nudge wakes the line's reconciler, as any change to it would, after the
// test moved the clock: the manual clock does not wake anything by itself.
func nudge(t *testing.T, key client.ObjectKey, at time.Time) {
	t.Helper()
	patch := fmt.Sprintf(`{"metadata":{"annotations":{"test.plumbline.dev/clock":%q}}}`, at.Format(time.RFC3339))
	line := &v1alpha1.ModelLine{}
	line.Namespace, line.Name = key.Namespace, key.Name
	if err := k8s.Patch(context.Background(), line, client.RawPatch("application/merge-patch+json", []byte(patch))); err != nil {
		t.Fatal(err)
	}
}

// judgedAt moves the clock to at, wakes the line and waits until the
// counter of evaluations (of its triggers or its guard) has grown.
func judgedAt(t *testing.T, key client.ObjectKey, at time.Time, counter string) {
	t.Helper()
	labels := map[string]string{"namespace": key.Namespace, "line": key.Name}
	before := metricSum(t, counter, labels)
	clk.SetTime(at)
	nudge(t, key, at)
	eventually(t, waitFor, func() error {
		if metricSum(t, counter, labels) <= before {
			return fmt.Errorf("%s did not grow at %s", counter, at.Format("15:04"))
		}
		return nil
	})
}

// evaluateAt moves the clock to at and waits for the line's trigger to be
// evaluated there; it returns the trigger's status.
func evaluateAt(t *testing.T, key client.ObjectKey, at time.Time) v1alpha1.TriggerStatus {
	t.Helper()
	judgedAt(t, key, at, "plumbline_trigger_evaluations_total")
	var st v1alpha1.TriggerStatus
	eventually(t, waitFor, func() error {
		line := getLine(t, key)
		if len(line.Status.Triggers) != 1 {
			return fmt.Errorf("trigger status %+v", line.Status.Triggers)
		}
		st = line.Status.Triggers[0]
		return nil
	})
	return st
}

// waitTriggerState evaluates at a time and waits for the status to show a
// state (the status write follows the evaluation).
func stateAt(t *testing.T, key client.ObjectKey, at time.Time, want v1alpha1.TriggerState) v1alpha1.TriggerStatus {
	t.Helper()
	evaluateAt(t, key, at)
	var st v1alpha1.TriggerStatus
	eventually(t, waitFor, func() error {
		line := getLine(t, key)
		if len(line.Status.Triggers) == 1 && line.Status.Triggers[0].State == want {
			st = line.Status.Triggers[0]
			return nil
		}
		return fmt.Errorf("at %s trigger status %+v, want %s", at.Format("15:04"), line.Status.Triggers, want)
	})
	return st
}

func trainedVersions(t *testing.T, ns string) []v1alpha1.ModelVersion {
	t.Helper()
	var list v1alpha1.ModelVersionList
	if err := k8s.List(context.Background(), &list, client.InNamespace(ns)); err != nil {
		t.Fatal(err)
	}
	var out []v1alpha1.ModelVersion
	for _, v := range list.Items {
		if v.Spec.Source == v1alpha1.SourceTrained {
			out = append(out, v)
		}
	}
	return out
}

// A twenty-minute dip never holds for the hour: Pending while it lasts,
// Inactive after, and no retrain.
func TestTriggerBriefDipDoesNotFire(t *testing.T) {
	key := watchedLine(t, "dip", nil)
	if st := stateAt(t, key, hm(2, 0), v1alpha1.TriggerInactive); st.Value == "" {
		t.Errorf("no value recorded: %+v", st)
	}
	st := stateAt(t, key, hm(3, 10), v1alpha1.TriggerPending)
	if st.Since == nil || !st.Since.Time.Equal(hm(3, 0)) {
		t.Errorf("pending since %v, want 03:00 (the first breaching point)", st.Since)
	}
	mustContain(t, "message", st.Message, "below 0.78 since 2026-11-02T03:00:00Z", "not yet for 1h0m0s")
	stateAt(t, key, hm(3, 19), v1alpha1.TriggerPending)
	stateAt(t, key, hm(3, 25), v1alpha1.TriggerInactive)
	stateAt(t, key, hm(4, 10), v1alpha1.TriggerInactive)
	if n := len(trainedVersions(t, key.Namespace)); n != 0 {
		t.Errorf("a brief dip started %d retrains", n)
	}
	waitEvent(t, key.Namespace, lineName, "TriggerPending")
}

// A drop that holds for the hour fires, the checks pass (data sound, inputs
// drifted, labels enough) and exactly one retrain starts; it keeps firing,
// but a version in flight and then the cooldown hold it back.
func TestTriggerSustainedDropFiresOnce(t *testing.T) {
	key := watchedLine(t, "sustained", nil)
	stateAt(t, key, hm(3, 30), v1alpha1.TriggerPending)
	stateAt(t, key, hm(3, 59), v1alpha1.TriggerPending)
	st := stateAt(t, key, hm(4, 0), v1alpha1.TriggerFiring)
	if !st.Since.Time.Equal(hm(3, 0)) || !strings.HasPrefix(st.Value, "0.7") {
		t.Errorf("firing status %+v", st)
	}
	mustContain(t, "message", st.Message, "below 0.78 at all 61 points over 1h0m0s")
	v := waitPhase(t, key.Namespace, "late-risk-v1", v1alpha1.PhaseTraining)
	if v.Spec.Cause != "Trigger/auc-drop" {
		t.Errorf("reason %q", v.Spec.Cause)
	}
	waitLineCondition(t, key, v1alpha1.ConditionBlocked, metav1.ConditionFalse, "ChecksPassed")
	waitEvent(t, key.Namespace, lineName, "RetrainStarted")
	waitEvent(t, key.Namespace, lineName, "TriggerFiring")

	// Still firing while the version trains: no second start.
	stateAt(t, key, hm(4, 5), v1alpha1.TriggerFiring)
	succeedJob(t, key.Namespace, "late-risk-v1-train", "")
	waitPhase(t, key.Namespace, "late-risk-v1", v1alpha1.PhaseEvaluating)
	failing := passingReport()
	failing.Metrics[0].Candidate = f(0.7)
	succeedJob(t, key.Namespace, "late-risk-v1-gate", encode(t, failing))
	waitPhase(t, key.Namespace, "late-risk-v1", v1alpha1.PhaseRejected)
	// Nothing in flight now, but within the cooldown (12 h): still one.
	stateAt(t, key, hm(4, 30), v1alpha1.TriggerFiring)
	stateAt(t, key, hm(8, 0), v1alpha1.TriggerFiring)
	settle()
	if n := len(trainedVersions(t, key.Namespace)); n != 1 {
		t.Errorf("%d retrains from one sustained drop, want 1", n)
	}
	labels := map[string]string{"namespace": key.Namespace, "path": "Trigger"}
	if metricSum(t, "plumbline_retrain_decisions_total", map[string]string{"namespace": key.Namespace, "outcome": "Cooldown"}) < 2 ||
		metricSum(t, "plumbline_retrain_decisions_total", map[string]string{"namespace": key.Namespace, "outcome": "InFlight"}) < 1 ||
		metricSum(t, "plumbline_retrain_decisions_total", labels) < 4 {
		t.Errorf("decision metrics do not show the started, in-flight and cooldown decisions")
	}
}

// A version that went live less than a window ago is not judged by the
// trigger on points from before it: the drop fires at 04:00, but v1 went
// live at 03:30, so the trigger waits for a whole hour of v1 (04:30) before
// it starts a retrain.
func TestTriggerWaitsForAWholeWindowOfTheLiveVersion(t *testing.T) {
	key := watchedLine(t, "live-too-recent", func(o *unstructured.Unstructured) {
		mustSet(t, o, "spec.cooldownSeconds", int64(600))
	})
	ns := key.Namespace
	retrainLive(t, key, "mid-drop", "late-risk-v1", hm(3, 10), hm(3, 30))

	stateAt(t, key, hm(4, 0), v1alpha1.TriggerFiring)
	stateAt(t, key, hm(4, 20), v1alpha1.TriggerFiring)
	settle()
	if n := len(trainedVersions(t, ns)); n != 1 {
		t.Fatalf("%d trained versions before a whole window of late-risk-v1, want 1", n)
	}
	if metricSum(t, "plumbline_retrain_decisions_total", map[string]string{"namespace": ns, "outcome": "LiveTooRecent"}) < 2 {
		t.Error("the decision metric does not count LiveTooRecent")
	}
	stateAt(t, key, hm(4, 31), v1alpha1.TriggerFiring)
	v := waitPhase(t, ns, "late-risk-v2", v1alpha1.PhaseTraining)
	if v.Spec.Cause != "Trigger/auc-drop" {
		t.Errorf("reason %q", v.Spec.Cause)
	}
}

// A drop while the address feed is broken: the retrain is refused.
func TestTriggerBlockedByDataQuality(t *testing.T) {
	key := watchedLine(t, "broken-feed", nil)
	stateAt(t, key, hm(4, 0), v1alpha1.TriggerFiring)
	line := waitLineCondition(t, key, v1alpha1.ConditionBlocked, metav1.ConditionTrue, "DataQualityIssue")
	mustContain(t, "Blocked message", meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionBlocked).Message,
		"Trigger/auc-drop", "data-quality check address-missing", "is 0.18", "fix the data first")
	ev := waitEvent(t, key.Namespace, lineName, "RetrainBlocked")
	mustContain(t, "event", ev.Note, "address-missing")
	// Still broken an evaluation later: still blocked, and no second event.
	stateAt(t, key, hm(4, 1), v1alpha1.TriggerFiring)
	settle()
	if n := len(trainedVersions(t, key.Namespace)); n != 0 {
		t.Errorf("retrained on broken data: %d versions", n)
	}
	if evs := eventsFor(t, key.Namespace, lineName, "RetrainBlocked"); len(evs) != 1 {
		t.Errorf("%d RetrainBlocked events, want 1 (one per change)", len(evs))
	}
	if metricSum(t, "plumbline_retrain_decisions_total", map[string]string{"namespace": key.Namespace, "outcome": "DataQualityIssue"}) < 2 {
		t.Error("the data-quality decisions are not counted")
	}
}

// A drop the inputs do not explain is for a person to look at.
func TestTriggerWithoutDriftNeedsReview(t *testing.T) {
	key := watchedLine(t, "no-drift", nil)
	stateAt(t, key, hm(4, 0), v1alpha1.TriggerFiring)
	line := waitLineCondition(t, key, v1alpha1.ConditionNeedsReview, metav1.ConditionTrue, "DegradedWithoutDrift")
	mustContain(t, "NeedsReview message", meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionNeedsReview).Message,
		"drift check depot-shift is 0.05", "a person should look")
	waitEvent(t, key.Namespace, lineName, "NeedsReview")
	settle()
	if n := len(trainedVersions(t, key.Namespace)); n != 0 {
		t.Errorf("retrained without drift: %d versions", n)
	}
}

// A drop with too few new labelled rows is not worth a retrain; with no
// fallback to try either, a person should look.
func TestTriggerWithTooFewLabels(t *testing.T) {
	key := watchedLine(t, "few-labels", func(o *unstructured.Unstructured) { mustSet(t, o, "spec.fallback", nil) })
	stateAt(t, key, hm(4, 0), v1alpha1.TriggerFiring)
	line := waitLineCondition(t, key, v1alpha1.ConditionNeedsReview, metav1.ConditionTrue, "InsufficientData")
	mustContain(t, "NeedsReview message", meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionNeedsReview).Message,
		"fresh-data check freshData is 3000", "below the 20000 new labelled rows")
	settle()
	if n := len(trainedVersions(t, key.Namespace)); n != 0 {
		t.Errorf("retrained on too little data: %d versions", n)
	}
}

// With Prometheus stopped, the trigger is Unknown and nothing happens; when
// it is back, the drop is seen and acted on.
func TestTriggerPrometheusDown(t *testing.T) {
	key := watchedLine(t, "prom-down", nil)
	stateAt(t, key, hm(3, 30), v1alpha1.TriggerPending)
	if err := promServer.Stop(); err != nil {
		t.Fatal(err)
	}
	restarted := false
	defer func() {
		if !restarted {
			_ = promServer.Restart()
		}
	}()
	st := stateAt(t, key, hm(4, 5), v1alpha1.TriggerUnknown)
	mustContain(t, "message", st.Message, "query failed")
	if st.Value != "NaN" {
		t.Errorf("value %q while unknown", st.Value)
	}
	waitEvent(t, key.Namespace, lineName, "TriggerUnknown")
	stateAt(t, key, hm(4, 10), v1alpha1.TriggerUnknown)
	settle()
	if n := len(trainedVersions(t, key.Namespace)); n != 0 {
		t.Fatalf("acted on Unknown: %d versions", n)
	}
	if err := promServer.Restart(); err != nil {
		t.Fatal(err)
	}
	restarted = true
	stateAt(t, key, hm(4, 15), v1alpha1.TriggerFiring)
	waitPhase(t, key.Namespace, "late-risk-v1", v1alpha1.PhaseTraining)
}

// A manual request whose checks cannot be judged waits, token and all, until
// they can.
func TestManualRequestWaitsForChecks(t *testing.T) {
	key := watchedLine(t, "manual-checks", nil)
	if err := promServer.Stop(); err != nil {
		t.Fatal(err)
	}
	restarted := false
	defer func() {
		if !restarted {
			_ = promServer.Restart()
		}
	}()
	clk.SetTime(hm(5, 0))
	requestRetrain(t, key, "after-outage")
	line := waitLineCondition(t, key, v1alpha1.ConditionBlocked, metav1.ConditionUnknown, "ChecksUnknown")
	if line.Status.LastRetrainRequest == "after-outage" || len(trainedVersions(t, key.Namespace)) != 0 {
		t.Fatalf("the request acted without its checks: token %q", line.Status.LastRetrainRequest)
	}
	if err := promServer.Restart(); err != nil {
		t.Fatal(err)
	}
	restarted = true
	nudge(t, key, hm(5, 1))
	waitPhase(t, key.Namespace, "late-risk-v1", v1alpha1.PhaseTraining)
	line = waitLineCondition(t, key, v1alpha1.ConditionBlocked, metav1.ConditionFalse, "ChecksPassed")
	if line.Status.LastRetrainRequest != "after-outage" {
		t.Errorf("token %q", line.Status.LastRetrainRequest)
	}
}

// waitScheduled nudges the line at a time and waits for its schedule's
// status to reach lastScheduleTime.
func waitScheduled(t *testing.T, key client.ObjectKey, at, last time.Time) *v1alpha1.ModelLine {
	t.Helper()
	clk.SetTime(at)
	nudge(t, key, at)
	var line *v1alpha1.ModelLine
	eventually(t, waitFor, func() error {
		line = getLine(t, key)
		if line.Status.LastScheduleTime == nil || !line.Status.LastScheduleTime.Time.Equal(last) {
			return fmt.Errorf("at %s lastScheduleTime %v, want %s", at.Format("15:04"), line.Status.LastScheduleTime, last.Format("15:04"))
		}
		return nil
	})
	return line
}

// An hourly schedule with a ten-minute starting deadline: starts missed past
// the deadline never run; a start due while a version is in flight is
// skipped; after missed starts only the latest runs. Scheduled starts skip
// the drift check (this line's inputs never drift).
func TestScheduleWithMissedStarts(t *testing.T) {
	key := watchedLine(t, "scheduled", func(o *unstructured.Unstructured) {
		mustSet(t, o, "spec.schedule", map[string]any{"cron": "0 * * * *", "timeZone": "UTC", "startingDeadlineSeconds": int64(600)})
	})
	ns := key.Namespace
	eventually(t, waitFor, func() error {
		line := getLine(t, key)
		if line.Status.NextScheduleTime == nil || !line.Status.NextScheduleTime.Time.Equal(hm(1, 0)) {
			return fmt.Errorf("nextScheduleTime %v, want 01:00", line.Status.NextScheduleTime)
		}
		return nil
	})

	// 01:00, 02:00 and 03:00 were missed; 03:00 by more than the deadline.
	line := waitScheduled(t, key, hm(3, 20), hm(3, 0))
	if !line.Status.NextScheduleTime.Time.Equal(hm(4, 0)) {
		t.Errorf("next %v", line.Status.NextScheduleTime)
	}
	ev := waitEvent(t, ns, lineName, "MissedSchedule")
	mustContain(t, "event", ev.Note, "3 scheduled starts missed", "past spec.schedule.startingDeadlineSeconds (600s)")
	if ev.Type != "Warning" {
		t.Errorf("event type %s", ev.Type)
	}
	if n := len(trainedVersions(t, ns)); n != 0 {
		t.Fatalf("a start past its deadline ran: %d versions", n)
	}

	// 04:00, five minutes late: runs, without a drift check.
	waitScheduled(t, key, hm(4, 5), hm(4, 0))
	v1 := waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseTraining)
	if v1.Spec.Cause != "Schedule" {
		t.Errorf("reason %q", v1.Spec.Cause)
	}

	// 05:00 while v1 trains: skipped.
	waitScheduled(t, key, hm(5, 2), hm(5, 0))
	waitEvent(t, ns, lineName, "ScheduleSkipped")
	if n := len(trainedVersions(t, ns)); n != 1 {
		t.Fatalf("%d versions after a start during a retrain", n)
	}
	failJob(t, ns, "late-risk-v1-train", "BackoffLimitExceeded", "Job has reached the specified backoff limit", "")
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseFailed)

	// 06:00 and 07:00 missed, 08:00 due: one catch-up start, a warning.
	before := len(eventsFor(t, ns, lineName, "MissedSchedule"))
	waitScheduled(t, key, hm(8, 3), hm(8, 0))
	waitPhase(t, ns, "late-risk-v2", v1alpha1.PhaseTraining)
	eventually(t, waitFor, func() error {
		for _, e := range eventsFor(t, ns, lineName, "MissedSchedule") {
			if strings.Contains(e.Note, "2 scheduled starts were missed") && strings.Contains(e.Note, "ran only the latest, at 2026-11-02T08:00:00Z") {
				return nil
			}
		}
		return fmt.Errorf("no catch-up warning among %d MissedSchedule events (had %d)", len(eventsFor(t, ns, lineName, "MissedSchedule")), before)
	})
	if n := len(trainedVersions(t, ns)); n != 2 {
		t.Errorf("%d versions, want 2", n)
	}
	if got := metricSum(t, "plumbline_schedule_missed_total", map[string]string{"namespace": ns}); got != 5 {
		t.Errorf("missed starts counted %v, want 5 (3 past the deadline, 2 caught up)", got)
	}
}

// A scheduled start on broken data is refused like any other.
func TestScheduleBlockedByDataQuality(t *testing.T) {
	key := watchedLine(t, "scheduled-broken", func(o *unstructured.Unstructured) {
		mustSet(t, o, "spec.schedule", map[string]any{"cron": "0 * * * *", "timeZone": "UTC"})
	})
	waitScheduled(t, key, hm(1, 1), hm(1, 0))
	line := waitLineCondition(t, key, v1alpha1.ConditionBlocked, metav1.ConditionTrue, "DataQualityIssue")
	mustContain(t, "Blocked message", meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionBlocked).Message, "retrain for Schedule", "address-missing", "0.2")
	settle()
	if n := len(trainedVersions(t, key.Namespace)); n != 0 {
		t.Errorf("%d versions", n)
	}
}

func init() {
	scenarios["first-inactive"] = scenario{auc: dropAt(hm(3, 0), 0.72), missing: constant(0.01), psi: step(hm(3, 0), 0.05, 0.4), labelled: constant(50000)}
}

// A line created when its trigger can already judge a whole window finds
// it Inactive at its first judgement: that is not news, and no event says
// it (a fleet's fresh start would otherwise write one per trigger). A
// change of state is: Pending when the drop starts.
func TestTriggerFirstInactiveIsQuiet(t *testing.T) {
	key := watchedLine(t, "first-inactive", func(*unstructured.Unstructured) {
		clk.SetTime(hm(2, 0)) // a whole window of history before the line
	})
	st := evaluateAt(t, key, hm(2, 1))
	if st.State != v1alpha1.TriggerInactive {
		t.Fatalf("first judgement %+v, want Inactive", st)
	}
	stateAt(t, key, hm(3, 10), v1alpha1.TriggerPending)
	// Events go out in order: once the Pending one is there, an Inactive
	// one of the first judgement would be too.
	waitEvent(t, key.Namespace, lineName, "TriggerPending")
	if evs := eventsFor(t, key.Namespace, lineName, "TriggerInactive"); len(evs) != 0 {
		t.Errorf("the first judgement, Inactive, was an event: %s", evs[0].Note)
	}
	if evs := eventsFor(t, key.Namespace, lineName, "TriggerUnknown"); len(evs) != 0 {
		t.Errorf("the trigger was Unknown first: %s", evs[0].Note)
	}
}
