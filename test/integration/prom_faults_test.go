package integration

import (
	"math"
	"testing"
	"time"

	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/testenv/promserver"
)

// Prometheus faults in the middle of a trigger's or the guard's window, on
// the real Prometheus: a query that hangs until it times out, one that
// Prometheus refuses with an error, one that returns NaN and one that
// returns no series. Each gives Unknown and no action, and the line acts on
// what Prometheus says once it answers again.

func init() {
	scenarios["prom-hang"] = scenario{auc: dropAt(hm(3, 0), 0.72), missing: constant(0.01), psi: step(hm(3, 0), 0.05, 0.4), labelled: constant(50000)}
	scenarios["prom-error"] = scenario{auc: dropAt(hm(3, 0), 0.72), missing: constant(0.01), psi: step(hm(3, 0), 0.05, 0.4), labelled: constant(50000)}
	// Production quality healthy until 01:00, then unknown for a while
	// (NaN; no samples at all), then regressed.
	scenarios["guard-nan"] = scenario{auc: healthy, missing: constant(0.01), psi: constant(0.05), labelled: constant(50000),
		live: spell(hm(1, 0), hm(1, 20), math.NaN())}
	scenarios["guard-gap"] = scenario{auc: healthy, missing: constant(0.01), psi: constant(0.05), labelled: constant(50000),
		live: spell(hm(1, 0), hm(1, 30), noSample)}
	extraHistory = append(extraHistory, errorSideSeries()...)
}

// spell is healthy before from, v from from to until, and regressed (0.70)
// after.
func spell(from, until time.Time, v float64) func(time.Time) float64 {
	return func(t time.Time) float64 {
		switch {
		case t.Before(from):
			return healthy(t)
		case t.Before(until):
			return v
		}
		return 0.70
	}
}

// errorSideSeries is a weight the prom-error trigger multiplies by, matched
// on the scenario label: one series always, and a second one from 03:35 to
// 03:45. While the second is in a window, Prometheus refuses the query
// ("found duplicate series for the match group").
func errorSideSeries() []promserver.Series {
	var out []promserver.Series
	for _, c := range []struct {
		copy     string
		from, to time.Time
	}{{"a", day0, day0.Add(12 * time.Hour)}, {"b", hm(3, 35), hm(3, 45)}} {
		s := promserver.Series{Name: "larkspur_auc_weight", Labels: map[string]string{"scenario": "prom-error", "copy": c.copy}}
		for t := c.from; t.Before(c.to); t = t.Add(time.Minute) {
			s.Samples = append(s.Samples, promserver.Sample{T: t, V: 1})
		}
		out = append(out, s)
	}
	return out
}

// A query that hangs (Prometheus frozen with SIGSTOP) times out: Unknown,
// no retrain; once it answers again the trigger fires and the retrain
// starts.
func TestTriggerPrometheusHangs(t *testing.T) {
	key := watchedLine(t, "prom-hang", nil)
	stateAt(t, key, hm(3, 30), v1alpha1.TriggerPending)
	if err := promServer.Pause(); err != nil {
		t.Fatal(err)
	}
	resumed := false
	defer func() {
		if !resumed {
			_ = promServer.Resume()
		}
	}()
	st := stateAt(t, key, hm(4, 5), v1alpha1.TriggerUnknown)
	mustContain(t, "message", st.Message, "query failed")
	settle()
	if n := len(trainedVersions(t, key.Namespace)); n != 0 {
		t.Fatalf("acted on a query that timed out: %d versions", n)
	}
	if err := promServer.Resume(); err != nil {
		t.Fatal(err)
	}
	resumed = true
	stateAt(t, key, hm(4, 15), v1alpha1.TriggerFiring)
	waitPhase(t, key.Namespace, "late-risk-v1", v1alpha1.PhaseTraining)
}

// A query Prometheus refuses for part of the window (a many-to-many match
// from 03:35) is Unknown for every window that holds that part, and acts
// nothing; the first window past it fires.
func TestTriggerQueryErrorsMidWindow(t *testing.T) {
	key := watchedLine(t, "prom-error", func(o *unstructured.Unstructured) {
		mustSet(t, o, "spec.triggers", []any{map[string]any{
			"name":  "auc-drop",
			"query": `larkspur_late_risk_roc_auc{scenario="prom-error"} * on(scenario) group_left() larkspur_auc_weight{scenario="prom-error"}`,
			"below": 0.78, "forSeconds": int64(3600), "everySeconds": int64(60),
		}})
	})
	stateAt(t, key, hm(3, 30), v1alpha1.TriggerPending)
	st := stateAt(t, key, hm(3, 40), v1alpha1.TriggerUnknown)
	mustContain(t, "message", st.Message, "query failed", "duplicate series")
	evaluateAt(t, key, hm(4, 30))
	settle()
	if st := getLine(t, key).Status.Triggers[0]; st.State != v1alpha1.TriggerUnknown {
		t.Errorf("at 04:30, with the refused stretch in the window, the trigger is %s", st.State)
	}
	if n := len(trainedVersions(t, key.Namespace)); n != 0 {
		t.Fatalf("acted on a refused query: %d versions", n)
	}
	stateAt(t, key, hm(4, 55), v1alpha1.TriggerFiring)
	waitPhase(t, key.Namespace, "late-risk-v1", v1alpha1.PhaseTraining)
}

// The guard's window holds NaN, or no samples at all: Unknown, Degraded
// Unknown, no rollback; once the window holds the regression, the guard
// switches to the rule-based version.
func TestGuardUnknownMidWindow(t *testing.T) {
	cases := []struct {
		scenario string
		unknown  []time.Time // evaluations that must be Unknown
		message  string
		firing   time.Time
	}{
		{"guard-nan", []time.Time{hm(1, 10), hm(1, 25)}, "points are there", hm(1, 31)},
		{"guard-gap", []time.Time{hm(1, 20), hm(1, 35)}, "", hm(1, 41)},
	}
	for _, c := range cases {
		t.Run(c.scenario, func(t *testing.T) {
			key := guardedLine(t, c.scenario)
			ns := key.Namespace
			guardAt(t, key, hm(0, 50))
			waitGuardState(t, key, v1alpha1.TriggerInactive)
			for _, at := range c.unknown {
				guardAt(t, key, at)
				line := waitGuardState(t, key, v1alpha1.TriggerUnknown)
				if c.message != "" {
					mustContain(t, "guard message", line.Status.Guard.Message, c.message)
				}
				waitLineCondition(t, key, v1alpha1.ConditionDegraded, metav1.ConditionUnknown, "GuardUnknown")
			}
			settle()
			if v := getVersion(t, ns, rulesName); v.Status.Phase != v1alpha1.PhaseStandby {
				t.Fatalf("acted on Unknown: the rules are %s", v.Status.Phase)
			}
			if a, v := served(t, ns); v != initial {
				t.Fatalf("the Deployment serves %s (%s) after Unknown", v, a)
			}
			guardAt(t, key, c.firing)
			waitGuardState(t, key, v1alpha1.TriggerFiring)
			v := waitPhase(t, ns, rulesName, v1alpha1.PhasePromoting)
			if p := v.Status.Promotion; p == nil || p.Kind != v1alpha1.PromotionFallback || p.FromVersion != initial {
				t.Errorf("switch %+v, want the rule-based fallback in place of %s", p, initial)
			}
		})
	}
}
