package modelline

import (
	"testing"
	"time"

	"k8s.io/utils/ptr"
	"sigs.k8s.io/controller-runtime/pkg/client/interceptor"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// The order of a pass is the phases table; these are the rules it keeps.
func TestPhaseOrder(t *testing.T) {
	at := map[string]int{}
	firstActing := -1
	for i, ph := range phases {
		if _, dup := at[ph.name]; dup {
			t.Fatalf("phase %q listed twice", ph.name)
		}
		at[ph.name] = i
		switch {
		case ph.acts && firstActing < 0:
			firstActing = i
		case !ph.acts && firstActing >= 0:
			t.Errorf("reporting phase %q comes after acting ones: a suspended line would skip what follows it", ph.name)
		}
	}
	before := func(a, b, why string) {
		t.Helper()
		ia, okA := at[a]
		ib, okB := at[b]
		if !okA || !okB {
			t.Fatalf("no phase %q or %q", a, b)
		}
		if ia >= ib {
			t.Errorf("%q must come before %q: %s", a, b, why)
		}
	}
	before("judge the triggers", "the triggers", "a trigger starts only on what this pass judged")
	before("judge the guard", "answer the guard", "the guard acts on this pass's judgement")
	before("settle the versions", "answer the guard", "the guard decides on the version that serves")
	for _, start := range []string{"a person's retrain request", "the schedule", "the triggers"} {
		before("undo failed rollouts", start, "production first")
		before("answer the guard", start, "a regression is answered before anything new starts")
		before("follow the alternatives", start, "production first")
		before("a person's rollback", start, "production first")
		before(start, "step the active version", "a version started in this pass takes its first step in it")
	}
	before("a person's retrain request", "the schedule", "a person's request goes first")
	before("the schedule", "the triggers", "the schedule goes before the triggers")
	before("step the active version", "alternatives when a retrain did not help", "the alternatives answer the candidate's gate")
	if last := phases[len(phases)-1].name; last != "prune history" {
		t.Errorf("the last phase is %q; pruning goes last, after every phase that may still need a version", last)
	}
}

// A suspended line reports (its triggers are judged) but does not act: a
// firing trigger and a person's request start nothing, and the request
// waits.
func TestSuspendedLineOnlyReports(t *testing.T) {
	line := passLine()
	line.Spec.Suspend = true
	line.Spec.Triggers = []v1alpha1.TriggerSpec{{Name: "auc-drop", Query: "late_risk_auc", Below: ptr.To(0.7), ForSeconds: 600, EverySeconds: 60}}
	w := newWorld(t, interceptor.Funcs{}, line, scorerDeployment("", "s3://larkspur/rules"))
	w.prom.value = func(string, time.Time) float64 { return 0.5 }
	w.annotate(v1alpha1.RetrainRequestAnnotation, "ops-1")
	w.mustPass()
	l := w.line()
	if len(l.Status.Triggers) != 1 || l.Status.Triggers[0].State != v1alpha1.TriggerFiring {
		t.Errorf("a suspended line's trigger status %+v, want Firing: it still reports", l.Status.Triggers)
	}
	if l.Status.LastRetrainRequest != "" || len(w.jobs()) != 0 {
		t.Errorf("a suspended line acted: request %q handled, %d Jobs", l.Status.LastRetrainRequest, len(w.jobs()))
	}
	var versions v1alpha1.ModelVersionList
	if err := w.c.List(t.Context(), &versions); err != nil || len(versions.Items) != 0 {
		t.Errorf("a suspended line created %d versions (%v)", len(versions.Items), err)
	}
}
