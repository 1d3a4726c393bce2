package modelline

import (
	"context"
	"errors"
	"math"
	"strings"
	"testing"
	"time"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/speccheck"
	"plumbline.dev/plumbline/internal/engine/trigger"
)

// Too few labelled predictions in a window, or a count that cannot be told,
// turn any judgement into Unknown; enough leave it as it was.
func TestEnoughLabels(t *testing.T) {
	end := time.Date(2026, 11, 2, 7, 0, 0, 0, time.UTC)
	w := trigger.Window{For: time.Hour, Every: time.Minute, Delay: 2 * time.Hour}
	need := &v1alpha1.LabelCount{Query: `sum(increase(larkspur_labelled_predictions_total{line="{{.Line}}"}[1h]))`, AtLeast: 500}
	firing := trigger.Result{State: v1alpha1.TriggerFiring, Value: 0.7, Message: "below 0.78 at all 61 points"}
	data := speccheck.QueryData{Line: "late-risk", Namespace: "larkspur"}
	cases := []struct {
		name    string
		count   float64
		err     error
		in      trigger.Result
		state   v1alpha1.TriggerState
		message string
		asked   bool
	}{
		{"enough", 800, nil, firing, v1alpha1.TriggerFiring, "below 0.78 at all 61 points", true},
		{"exactly enough", 500, nil, firing, v1alpha1.TriggerFiring, "below 0.78 at all 61 points", true},
		{"too few", 120, nil, firing, v1alpha1.TriggerUnknown,
			"predictions of 2026-11-02 06:00 to 07:00 UTC: only 120 labelled predictions in the window, 500 needed (enoughLabels.atLeast)", true},
		{"too few, even for Inactive", 0, nil, trigger.Result{State: v1alpha1.TriggerInactive, Value: 0.82}, v1alpha1.TriggerUnknown, "only 0 labelled predictions", true},
		{"no count", math.NaN(), nil, firing, v1alpha1.TriggerUnknown, "enoughLabels.query returned no count", true},
		{"count fails", 0, errors.New("connection refused"), firing, v1alpha1.TriggerUnknown, "cannot count the window's labelled predictions (enoughLabels.query): connection refused", true},
		{"already Unknown", 0, nil, trigger.Result{State: v1alpha1.TriggerUnknown, Message: "the query returned no series"}, v1alpha1.TriggerUnknown, "the query returned no series", false},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			prom := &stubProm{value: func(string, time.Time) float64 { return c.count }, err: c.err}
			r := &Reconciler{Prometheus: prom}
			got := r.enoughLabels(context.Background(), need, data, w, end, c.in)
			if got.State != c.state || !strings.Contains(got.Message, c.message) {
				t.Errorf("%s %q, want %s containing %q", got.State, got.Message, c.state, c.message)
			}
			if asked := len(prom.asked) > 0; asked != c.asked {
				t.Errorf("asked Prometheus: %v, want %v", asked, c.asked)
			} else if asked && !strings.Contains(prom.asked[0], `line="late-risk"`) {
				t.Errorf("the count query was not rendered for the line: %s", prom.asked[0])
			}
		})
	}
	r := &Reconciler{Prometheus: &stubProm{value: func(string, time.Time) float64 { return 0 }}}
	if got := r.enoughLabels(context.Background(), nil, data, w, end, firing); got.State != v1alpha1.TriggerFiring {
		t.Errorf("without enoughLabels the judgement stands: %s", got.State)
	}
}

// Before its first window of its own labelled predictions the guard waits,
// and says why; a query that does not name the version gets a reason of its
// own, since until then it would judge the replaced version.
func TestGuardWaits(t *testing.T) {
	promoted := time.Date(2026, 11, 2, 6, 0, 0, 0, time.UTC)
	w := trigger.Window{For: 10 * time.Minute, Every: time.Minute}
	res, reason := guardWaits("late-risk-v1", `larkspur_live_auc`, w, promoted, w.Matured(promoted))
	if reason != "" || !math.IsNaN(res.Value) || res.State != v1alpha1.TriggerInactive || !strings.Contains(res.Message, "first full 10m0s window ends at 2026-11-02T06:10:00Z") {
		t.Errorf("no delay: %q %+v", reason, res)
	}
	w.Delay = 2 * time.Hour
	res, reason = guardWaits("late-risk-v1", `larkspur_live_auc`, w, promoted, w.Matured(promoted))
	if reason != reasonGuardAwaitingLabels || !strings.Contains(res.Message, "waiting for late-risk-v1's own labelled predictions (label delay 2h0m0s; promoted at 2026-11-02T06:00:00Z)") ||
		!strings.Contains(res.Message, "from 2026-11-02T08:10:00Z") || !strings.Contains(res.Message, "does not name the version") {
		t.Errorf("a delay, no {{.Version}}: %q %q", reason, res.Message)
	}
	res, reason = guardWaits("late-risk-v1", `larkspur_live_auc{version="{{.Version}}"}`, w, promoted, w.Matured(promoted))
	if reason != "" || !strings.Contains(res.Message, "its own series ({{.Version}}) from 2026-11-02T08:10:00Z") {
		t.Errorf("a delay and {{.Version}}: %q %q", reason, res.Message)
	}
}
