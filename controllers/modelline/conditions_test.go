package modelline

import (
	"strings"
	"testing"
	"time"

	appsv1 "k8s.io/api/apps/v1"
	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/speccheck"
)

func TestReadyCondition(t *testing.T) {
	bad := []speccheck.Problem{{Field: "spec.schedule.cron", Message: "not a cron expression"}}
	cases := []struct {
		name       string
		suspended  bool
		obs        lineObservation
		wantStatus metav1.ConditionStatus
		wantReason string
		wantText   string
	}{
		{"all well", false, lineObservation{}, metav1.ConditionTrue, v1alpha1.ReasonSpecValid, "spec is valid"},
		{"spec problem", false, lineObservation{problems: bad}, metav1.ConditionFalse, v1alpha1.ReasonInvalidSpec, "spec.schedule.cron: not a cron expression"},
		{"spec problem beats missing Deployment", false, lineObservation{problems: bad, servingMissing: "no Deployment"}, metav1.ConditionFalse, v1alpha1.ReasonInvalidSpec, "spec.schedule.cron"},
		{"missing Deployment", false, lineObservation{servingMissing: "no Deployment"}, metav1.ConditionFalse, v1alpha1.ReasonServingNotFound, "no Deployment"},
		{"missing Deployment beats missing fallback", false, lineObservation{servingMissing: "no Deployment", fallbackMissing: "no rules"}, metav1.ConditionFalse, v1alpha1.ReasonServingNotFound, "no Deployment"},
		{"missing fallback", false, lineObservation{fallbackMissing: "no rules"}, metav1.ConditionFalse, v1alpha1.ReasonFallbackNotFound, "no rules"},
		{"suspended", true, lineObservation{}, metav1.ConditionTrue, v1alpha1.ReasonSuspended, "spec.suspend"},
		{"suspended but invalid", true, lineObservation{problems: bad}, metav1.ConditionFalse, v1alpha1.ReasonInvalidSpec, "spec.schedule.cron"},
	}
	for _, tc := range cases {
		c := readyCondition(tc.suspended, tc.obs)
		if c.Type != v1alpha1.ConditionReady || c.Status != tc.wantStatus || c.Reason != tc.wantReason || !strings.Contains(c.Message, tc.wantText) {
			t.Errorf("%s: got %s=%s/%s %q; want %s/%s containing %q", tc.name, c.Type, c.Status, c.Reason, c.Message, tc.wantStatus, tc.wantReason, tc.wantText)
		}
	}
}

func TestSetCondition(t *testing.T) {
	t0 := metav1.NewTime(time.Date(2026, 11, 2, 9, 0, 0, 0, time.UTC))
	t1 := metav1.NewTime(t0.Add(time.Hour))
	t2 := metav1.NewTime(t0.Add(2 * time.Hour))
	var conds []metav1.Condition

	if !setCondition(&conds, metav1.Condition{Type: "Ready", Status: metav1.ConditionFalse, Reason: "A", Message: "m"}, 1, t0) {
		t.Error("a new condition is a change")
	}
	if got := conds[0]; !got.LastTransitionTime.Equal(&t0) || got.ObservedGeneration != 1 {
		t.Errorf("new condition: %+v", got)
	}
	if setCondition(&conds, metav1.Condition{Type: "Ready", Status: metav1.ConditionFalse, Reason: "A", Message: "m"}, 2, t1) {
		t.Error("the same condition again is not a change")
	}
	if got := conds[0]; !got.LastTransitionTime.Equal(&t0) || got.ObservedGeneration != 2 {
		t.Errorf("unchanged condition must keep its transition time and take the generation: %+v", got)
	}
	if !setCondition(&conds, metav1.Condition{Type: "Ready", Status: metav1.ConditionFalse, Reason: "B", Message: "m"}, 2, t1) {
		t.Error("a new reason is a change")
	}
	if got := conds[0]; !got.LastTransitionTime.Equal(&t0) {
		t.Errorf("a reason change without a status change keeps the transition time: %+v", got)
	}
	if !setCondition(&conds, metav1.Condition{Type: "Ready", Status: metav1.ConditionTrue, Reason: "B", Message: "m"}, 2, t2) {
		t.Error("a new status is a change")
	}
	if got := conds[0]; !got.LastTransitionTime.Equal(&t2) {
		t.Errorf("a status change takes the clock's time: %+v", got)
	}
	if len(conds) != 1 {
		t.Errorf("one condition type must stay one entry, have %d", len(conds))
	}
}

func TestMissingContainer(t *testing.T) {
	dep := &appsv1.Deployment{}
	dep.Name = "late-risk-scorer"
	dep.Spec.Template.Spec.Containers = []corev1.Container{{Name: "sidecar"}, {Name: "api"}}
	msg := missingContainer(dep, "scorer")
	for _, want := range []string{`"late-risk-scorer"`, `no container "scorer"`, "spec.serving.containerName", "api, sidecar"} {
		if !strings.Contains(msg, want) {
			t.Errorf("message %q lacks %q", msg, want)
		}
	}
	if msg := missingContainer(dep, "api"); msg != "" {
		t.Errorf("container present: got %q", msg)
	}
}

func TestFallbackProblems(t *testing.T) {
	v := &v1alpha1.ModelVersion{}
	v.Name = "late-risk-rules"
	v.Spec = v1alpha1.ModelVersionSpec{Line: "late-risk", Source: v1alpha1.SourceRuleBased}
	if ps := fallbackProblems("late-risk", v); len(ps) != 0 {
		t.Errorf("a rule-based version of the line: %v", ps)
	}
	v.Spec.Source = v1alpha1.SourceTrained
	v.Spec.Line = "other"
	ps := fallbackProblems("late-risk", v)
	if len(ps) != 2 || !strings.Contains(ps[0].Message, "source Trained") || !strings.Contains(ps[1].Message, `line "other"`) {
		t.Errorf("want source and line problems, got %v", ps)
	}
	for _, p := range ps {
		if p.Field != "spec.fallback.ruleBasedVersion" {
			t.Errorf("field %q", p.Field)
		}
	}
}
