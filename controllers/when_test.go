package controllers

import (
	"math"
	"strings"
	"testing"
	"time"

	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/types"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/trigger"
)

func ok(kind, name string, v float64) check {
	return check{kind: kind, name: name, known: true, value: v}
}

func breach(kind, name string, v float64) check {
	return check{kind: kind, name: name, known: true, breached: true, value: v}
}

func unknown(kind, name string) check {
	return check{kind: kind, name: name, err: "dial tcp: connection refused"}
}

func TestDecideStart(t *testing.T) {
	fresh := func(c check) *check { return &c }
	cases := []struct {
		name    string
		path    string
		cr      checkResults
		outcome string
		text    string
	}{
		{"no checks", pathTrigger, checkResults{}, outcomeStarted, "checks passed"},
		{"all pass", pathTrigger, checkResults{
			dataQuality: []check{ok("data-quality", "address-missing", 0.01)},
			drift:       []check{breach("drift", "depot-shift", 0.4)},
			freshData:   fresh(ok("fresh-data", "freshData", 50000)), atLeast: 20000}, outcomeStarted, ""},
		{"broken data", pathTrigger, checkResults{
			dataQuality: []check{ok("data-quality", "scan-feed", 10), breach("data-quality", "address-missing", 0.18)},
			drift:       []check{breach("drift", "depot-shift", 0.4)}}, outcomeDataQuality, "data-quality check address-missing is 0.18"},
		{"a breach beats an unknown", pathTrigger, checkResults{
			dataQuality: []check{unknown("data-quality", "scan-feed"), breach("data-quality", "address-missing", 0.18)}}, outcomeDataQuality, "address-missing"},
		{"data quality unknown", pathManual, checkResults{
			dataQuality: []check{unknown("data-quality", "scan-feed")}}, outcomeChecksUnknown, "could not be judged: dial tcp"},
		{"no drift", pathTrigger, checkResults{
			drift: []check{ok("drift", "depot-shift", 0.05), ok("drift", "distance-shift", 0.02)}}, outcomeNoDrift, "drift check depot-shift is 0.05; drift check distance-shift is 0.02"},
		{"one drift is enough", pathTrigger, checkResults{
			drift: []check{ok("drift", "depot-shift", 0.05), breach("drift", "distance-shift", 0.3)}}, outcomeStarted, ""},
		{"drift found despite an unknown", pathTrigger, checkResults{
			drift: []check{unknown("drift", "depot-shift"), breach("drift", "distance-shift", 0.3)}}, outcomeStarted, ""},
		{"no drift found, one unknown", pathTrigger, checkResults{
			drift: []check{unknown("drift", "depot-shift"), ok("drift", "distance-shift", 0.1)}}, outcomeChecksUnknown, "depot-shift"},
		{"schedule skips drift", pathSchedule, checkResults{
			drift: []check{ok("drift", "depot-shift", 0.05)}}, outcomeStarted, ""},
		{"too few labels", pathTrigger, checkResults{
			freshData: fresh(breach("fresh-data", "freshData", 3000)), atLeast: 20000}, outcomeInsufficient, "fresh-data check freshData is 3000, below the 20000"},
		{"fresh data unknown", pathSchedule, checkResults{
			freshData: fresh(unknown("fresh-data", "freshData")), atLeast: 20000}, outcomeChecksUnknown, "freshData could not be judged"},
		{"data quality before fresh data", pathSchedule, checkResults{
			dataQuality: []check{breach("data-quality", "address-missing", 0.2)},
			freshData:   fresh(breach("fresh-data", "freshData", 3000)), atLeast: 20000}, outcomeDataQuality, ""},
	}
	for _, c := range cases {
		v := decideStart(c.path, c.cr)
		if v.outcome != c.outcome || !strings.Contains(v.message, c.text) {
			t.Errorf("%s: %s %q, want %s containing %q", c.name, v.outcome, v.message, c.outcome, c.text)
		}
	}
}

func TestNextTriggerStatus(t *testing.T) {
	now := metav1.NewTime(time.Date(2026, 11, 2, 4, 0, 0, 0, time.UTC))
	run := time.Date(2026, 11, 2, 3, 0, 0, 0, time.UTC)
	firing := trigger.Result{State: v1alpha1.TriggerFiring, Value: 0.72, Since: run, Message: "below 0.78 at all 61 points"}

	st := nextTriggerStatus(nil, "auc-drop", firing, now)
	if st.State != v1alpha1.TriggerFiring || !st.Since.Time.Equal(run) || st.Value != "0.72" || st.Name != "auc-drop" {
		t.Errorf("first status %+v", st)
	}
	// The same state again: nothing changes, not even the value.
	later := firing
	later.Value = 0.7
	if again := nextTriggerStatus(&st, "auc-drop", later, metav1.NewTime(now.Add(time.Minute))); again != st {
		t.Errorf("unchanged state rewrote the status: %+v", again)
	}
	// A change: the time of the change, the value then.
	inactive := nextTriggerStatus(&st, "auc-drop", trigger.Result{State: v1alpha1.TriggerInactive, Value: 0.81}, now)
	if inactive.State != v1alpha1.TriggerInactive || !inactive.Since.Equal(&now) || inactive.Value != "0.81" {
		t.Errorf("inactive %+v", inactive)
	}
	unknown := nextTriggerStatus(&inactive, "auc-drop", trigger.Unknown(errString("query failed")), now)
	if unknown.Value != "NaN" || unknown.Message != "query failed" {
		t.Errorf("unknown %+v", unknown)
	}
}

type errString string

func (e errString) Error() string { return string(e) }

func TestEvaluationsCadence(t *testing.T) {
	var e evaluations
	key := types.NamespacedName{Namespace: "larkspur", Name: "late-risk"}
	t0 := time.Date(2026, 11, 2, 4, 0, 0, 0, time.UTC)
	if due, next := e.due(key, 1, "auc-drop", time.Minute, t0); !due || !next.Equal(t0.Add(time.Minute)) {
		t.Errorf("never evaluated: due %v next %s", due, next)
	}
	e.done(key, 1, []string{"auc-drop"}, t0)
	if due, next := e.due(key, 1, "auc-drop", time.Minute, t0.Add(30*time.Second)); due || !next.Equal(t0.Add(time.Minute)) {
		t.Errorf("30s later: due %v next %s", due, next)
	}
	if due, _ := e.due(key, 1, "auc-drop", time.Minute, t0.Add(time.Minute)); !due {
		t.Error("a period later: not due")
	}
	if due, _ := e.due(key, 2, "auc-drop", time.Minute, t0.Add(time.Second)); !due {
		t.Error("a new generation is evaluated at once")
	}
	e.forget(key)
	if due, _ := e.due(key, 2, "auc-drop", time.Minute, t0.Add(time.Second)); !due {
		t.Error("forgotten line not due")
	}
}

func TestRunCheckString(t *testing.T) {
	c := check{kind: "data-quality", name: "address-missing", known: true, breached: true, value: 0.18, series: `{feature="address_confidence"}`}
	if got := c.String(); got != `data-quality check address-missing {feature="address_confidence"} is 0.18` {
		t.Errorf("got %q", got)
	}
	c.value = math.Inf(1)
	if !strings.Contains(c.String(), "+Inf") {
		t.Errorf("got %q", c.String())
	}
}
