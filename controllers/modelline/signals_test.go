package modelline

import (
	"fmt"
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
	if due, next := e.due(key, 1, "auc-drop", time.Minute, t0, false); !due || !next.Equal(t0.Add(time.Minute)) {
		t.Errorf("never evaluated: due %v next %s", due, next)
	}
	e.done(key, 1, []string{"auc-drop"}, t0)
	if due, next := e.due(key, 1, "auc-drop", time.Minute, t0.Add(30*time.Second), false); due || !next.Equal(t0.Add(time.Minute)) {
		t.Errorf("30s later: due %v next %s", due, next)
	}
	if due, _ := e.due(key, 1, "auc-drop", time.Minute, t0.Add(time.Minute), false); !due {
		t.Error("a period later: not due")
	}
	if due, _ := e.due(key, 2, "auc-drop", time.Minute, t0.Add(time.Second), false); !due {
		t.Error("a new generation is evaluated at once")
	}
	e.forget(key)
	if due, _ := e.due(key, 2, "auc-drop", time.Minute, t0.Add(time.Second), false); !due {
		t.Error("forgotten line not due")
	}
}

// Spread, each line has its own slot in the interval: a fleet evaluated
// together once (a start) comes due spread over the next interval, each
// line a whole interval apart after that, and all triggers of a line on
// one slot.
func TestEvaluationsSpread(t *testing.T) {
	var e evaluations
	t0 := time.Date(2026, 11, 2, 4, 0, 0, 0, time.UTC)
	every := time.Minute
	perSecond := map[int]int{}
	for i := range 600 {
		key := types.NamespacedName{Namespace: "larkspur", Name: fmt.Sprintf("line-%d", i)}
		due, next := e.due(key, 1, "auc-drop", every, t0, true)
		if !due {
			t.Fatal("a line never evaluated is due at once")
		}
		e.done(key, 1, []string{"auc-drop", "late-share"}, t0)
		if next.Before(t0.Add(every/2)) || !next.Before(t0.Add(every*3/2)) {
			t.Fatalf("%s: next %s, want within [30s, 90s) of the first", key.Name, next.Sub(t0))
		}
		if next.Sub(t0.Add(slotOffset(key, every)))%every != 0 {
			t.Fatalf("%s: next %s is not on its slot %s", key.Name, next.Sub(t0), slotOffset(key, every))
		}
		if due, _ := e.due(key, 1, "auc-drop", every, next.Add(-time.Second), true); due {
			t.Fatalf("%s: due a second before its slot", key.Name)
		}
		due, after := e.due(key, 1, "late-share", every, next, true)
		if !due {
			t.Fatalf("%s: the line's other trigger is not due on the same slot", key.Name)
		}
		if after.Sub(next) != every {
			t.Fatalf("%s: then due %s later, want a whole interval", key.Name, after.Sub(next))
		}
		perSecond[int(next.Sub(t0)/time.Second)]++
	}
	// 600 lines over 60 one-second buckets: about ten each; none holds a
	// crowd (a fixed hash: this is a property of the spread, not a flake).
	for s, n := range perSecond {
		if n > 30 {
			t.Errorf("%d lines come due in second %d", n, s)
		}
	}
	if len(perSecond) < 50 {
		t.Errorf("600 lines come due in only %d distinct seconds of 60", len(perSecond))
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
