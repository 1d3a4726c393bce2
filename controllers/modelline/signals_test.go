package modelline

import (
	"math"
	"strings"
	"testing"
	"time"

	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/types"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/trigger"
)

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
	c := check{Kind: "data-quality", Name: "address-missing", Known: true, Breached: true, Value: 0.18, Series: `{feature="address_confidence"}`}
	if got := c.String(); got != `data-quality check address-missing {feature="address_confidence"} is 0.18` {
		t.Errorf("got %q", got)
	}
	c.Value = math.Inf(1)
	if !strings.Contains(c.String(), "+Inf") {
		t.Errorf("got %q", c.String())
	}
}
