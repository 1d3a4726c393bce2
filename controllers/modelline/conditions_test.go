package modelline

import (
	"errors"
	"fmt"
	"slices"
	"strings"
	"testing"
	"time"

	appsv1 "k8s.io/api/apps/v1"
	corev1 "k8s.io/api/core/v1"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/runtime/schema"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/policy"
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
		{"a permission refused", false, lineObservation{}, metav1.ConditionFalse, v1alpha1.ReasonPermissionDenied, `cannot create resource "jobs"`},
		{"a spec problem beats a permission", false, lineObservation{problems: bad}, metav1.ConditionFalse, v1alpha1.ReasonInvalidSpec, "spec.schedule.cron"},
		{"an error that is not a refusal", false, lineObservation{}, metav1.ConditionTrue, v1alpha1.ReasonSpecValid, "spec is valid"},
	}
	forbidden := apierrors.NewForbidden(schema.GroupResource{Group: "batch", Resource: "jobs"}, "late-risk-v1-train", errors.New(`cannot create resource "jobs"`))
	for _, tc := range cases {
		var err error
		switch {
		case strings.Contains(tc.name, "permission"):
			err = forbidden
		case strings.Contains(tc.name, "not a refusal"):
			err = apierrors.NewInternalError(errors.New("etcdserver: leader changed"))
		}
		c := readyCondition(tc.suspended, tc.obs, err)
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

// judgeConditions applies judgements in order: the last one found for a
// condition wins, a sticky one keeps the message of the change, a recovery
// withdraws only what it answers, and an event goes out only on a change.
func TestJudgeConditions(t *testing.T) {
	now := metav1.NewTime(time.Date(2026, 11, 2, 9, 0, 0, 0, time.UTC))
	line := &v1alpha1.ModelLine{}
	ev := func(reason string) *event { return lineEvent(line, nil, "test", "Warning", reason, reason) }
	blocked := func(s metav1.ConditionStatus, reason, msg string, e *event) judgement {
		return judgement{cond: v1alpha1.ConditionBlocked, status: s, reason: reason, message: msg, sticky: true, event: e}
	}
	recovered := judgement{cond: v1alpha1.ConditionNeedsReview, status: metav1.ConditionFalse, reason: "Recovered", message: "healthy", onlyWhile: []string{"NoFallback"}}
	cases := []struct {
		name    string
		before  []metav1.Condition
		js      []judgement
		typ     string
		status  metav1.ConditionStatus
		reason  string
		message string
		events  []string
	}{
		{"a first judgement sets and tells", nil,
			[]judgement{blocked(metav1.ConditionTrue, "DataQualityIssue", "address missing 0.31", ev("RetrainBlocked"))},
			v1alpha1.ConditionBlocked, metav1.ConditionTrue, "DataQualityIssue", "address missing 0.31", []string{"RetrainBlocked"}},
		{"sticky: the same status and reason keep the first message, and tell nothing",
			[]metav1.Condition{{Type: v1alpha1.ConditionBlocked, Status: metav1.ConditionTrue, Reason: "DataQualityIssue", Message: "address missing 0.31"}},
			[]judgement{blocked(metav1.ConditionTrue, "DataQualityIssue", "address missing 0.29", ev("RetrainBlocked"))},
			v1alpha1.ConditionBlocked, metav1.ConditionTrue, "DataQualityIssue", "address missing 0.31", nil},
		{"the last judgement of a pass wins", nil,
			[]judgement{blocked(metav1.ConditionUnknown, "CheckRunning", "check Job running", nil), blocked(metav1.ConditionFalse, "ChecksPassed", "started", nil)},
			v1alpha1.ConditionBlocked, metav1.ConditionFalse, "ChecksPassed", "started", nil},
		{"a recovery withdraws what it answers",
			[]metav1.Condition{{Type: v1alpha1.ConditionNeedsReview, Status: metav1.ConditionTrue, Reason: "NoFallback", Message: "nothing to fall back to"}},
			[]judgement{recovered}, v1alpha1.ConditionNeedsReview, metav1.ConditionFalse, "Recovered", "healthy", nil},
		{"and only that",
			[]metav1.Condition{{Type: v1alpha1.ConditionNeedsReview, Status: metav1.ConditionTrue, Reason: "DegradedWithoutDrift", Message: "no drift"}},
			[]judgement{recovered}, v1alpha1.ConditionNeedsReview, metav1.ConditionTrue, "DegradedWithoutDrift", "no drift", nil},
		{"a recovery of nothing sets nothing", nil, []judgement{recovered}, v1alpha1.ConditionNeedsReview, "", "", "", nil},
	}
	for _, c := range cases {
		conds := append([]metav1.Condition(nil), c.before...)
		evs := judgeConditions(&conds, c.js, 3, now)
		got := meta.FindStatusCondition(conds, c.typ)
		switch {
		case c.status == "" && got != nil:
			t.Errorf("%s: %+v, want no condition", c.name, *got)
		case c.status != "" && (got == nil || got.Status != c.status || got.Reason != c.reason || got.Message != c.message):
			t.Errorf("%s: %+v, want %s/%s %q", c.name, got, c.status, c.reason, c.message)
		}
		var reasons []string
		for _, e := range evs {
			reasons = append(reasons, e.reason)
		}
		if strings.Join(reasons, ",") != strings.Join(c.events, ",") {
			t.Errorf("%s: events %v, want %v", c.name, reasons, c.events)
		}
	}
}

// What each start decision says of Blocked and NeedsReview.
func TestStartJudgements(t *testing.T) {
	line := &v1alpha1.ModelLine{}
	cases := []struct {
		outcome string
		want    []string // cond=status/reason
		events  []string
	}{
		{outcomeStarted, []string{"Blocked=False/ChecksPassed", "NeedsReview=False/Retraining"}, nil},
		{outcomeDataQuality, []string{"Blocked=True/DataQualityIssue"}, []string{"RetrainBlocked"}},
		{outcomeChecksUnknown, []string{"Blocked=Unknown/ChecksUnknown"}, []string{"ChecksUnknown"}},
		{outcomeNoDrift, []string{"Blocked=False/DataQualityOK", "NeedsReview=True/DegradedWithoutDrift"}, []string{"NeedsReview"}},
		{outcomeInsufficient, []string{"Blocked=False/DataQualityOK", "NeedsReview=True/InsufficientData"}, []string{"NeedsReview"}},
		{outcomeInFlight, nil, nil},
	}
	for _, c := range cases {
		var got, evs []string
		for _, j := range startJudgements(line, "Trigger/auc-drop", policy.Verdict{Outcome: c.outcome, Message: "m"}) {
			got = append(got, fmt.Sprintf("%s=%s/%s", j.cond, j.status, j.reason))
			if !j.sticky || !strings.Contains(j.message, "Trigger/auc-drop") && j.reason != "DataQualityOK" {
				t.Errorf("%s: judgement %+v is not sticky or does not name what asked", c.outcome, j)
			}
			if j.event != nil {
				evs = append(evs, j.event.reason)
			}
		}
		if strings.Join(got, ",") != strings.Join(c.want, ",") || strings.Join(evs, ",") != strings.Join(c.events, ",") {
			t.Errorf("%s: %v %v, want %v %v", c.outcome, got, evs, c.want, c.events)
		}
	}
}

// What the guard's verdict says of Degraded and NeedsReview; a switch tells
// of itself, so Degraded has no event of its own then.
func TestGuardJudgements(t *testing.T) {
	line := &v1alpha1.ModelLine{}
	live := &v1alpha1.ModelVersion{}
	cases := []struct {
		name   string
		v      guardVerdict
		want   []string
		events []string
	}{
		{"healthy", guardVerdict{degraded: metav1.ConditionFalse, reason: reasonGuardHealthy}, []string{"Degraded=False/Healthy", "NeedsReview=False/Recovered"}, nil},
		{"unknown", guardVerdict{degraded: metav1.ConditionUnknown, reason: reasonGuardUnknown}, []string{"Degraded=Unknown/GuardUnknown"}, nil},
		{"switching", guardVerdict{degraded: metav1.ConditionTrue, reason: reasonRegressed, target: live}, []string{"Degraded=True/Regressed"}, nil},
		{"after probation", guardVerdict{degraded: metav1.ConditionTrue, reason: reasonRegressedLate}, []string{"Degraded=True/RegressedAfterProbation"}, []string{"Degraded"}},
		{"nothing to fall back to", guardVerdict{degraded: metav1.ConditionTrue, reason: reasonNoFallback, review: true},
			[]string{"Degraded=True/NoFallback", "NeedsReview=True/NoFallback"}, []string{"Degraded", "NeedsReview"}},
	}
	for _, c := range cases {
		var got, evs []string
		for _, j := range guardJudgements(line, live, c.v) {
			got = append(got, fmt.Sprintf("%s=%s/%s", j.cond, j.status, j.reason))
			if j.event != nil {
				evs = append(evs, j.event.reason)
			}
		}
		if strings.Join(got, ",") != strings.Join(c.want, ",") || strings.Join(evs, ",") != strings.Join(c.events, ",") {
			t.Errorf("%s: %v %v, want %v %v", c.name, got, evs, c.want, c.events)
		}
	}
}

// The triggers falling quiet withdraw the review they asked for: every
// trigger Inactive, and none is not.
func TestQuietJudgement(t *testing.T) {
	line := &v1alpha1.ModelLine{}
	if quietJudgement(line) != nil {
		t.Error("a line without triggers fell quiet")
	}
	line.Status.Triggers = []v1alpha1.TriggerStatus{{Name: "a", State: v1alpha1.TriggerInactive}, {Name: "b", State: v1alpha1.TriggerPending}}
	if quietJudgement(line) != nil {
		t.Error("quiet while a trigger is Pending")
	}
	line.Status.Triggers[1].State = v1alpha1.TriggerInactive
	j := quietJudgement(line)
	if j == nil || j.status != metav1.ConditionFalse || !slices.Equal(j.onlyWhile, []string{outcomeNoDrift, outcomeInsufficient}) {
		t.Errorf("quiet: %+v", j)
	}
}
