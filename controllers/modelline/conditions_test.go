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

func TestSetupProblem(t *testing.T) {
	bad := []speccheck.Problem{{Field: "spec.schedule.cron", Message: "not a cron expression"}}
	forbidden := apierrors.NewForbidden(schema.GroupResource{Group: "batch", Resource: "jobs"}, "late-risk-v1-train", errors.New(`cannot create resource "jobs"`))
	transient := apierrors.NewInternalError(errors.New("etcdserver: leader changed"))
	cases := []struct {
		name       string
		obs        lineObservation
		err        error
		wantReason string // empty: no problem
		wantText   string
	}{
		{"all well", lineObservation{}, nil, "", ""},
		{"spec problem", lineObservation{problems: bad}, nil, v1alpha1.ReasonInvalidSpec, "spec.schedule.cron: not a cron expression"},
		{"spec problem beats missing Deployment", lineObservation{problems: bad, servingMissing: "no Deployment"}, nil, v1alpha1.ReasonInvalidSpec, "spec.schedule.cron"},
		{"missing Deployment", lineObservation{servingMissing: "no Deployment"}, nil, v1alpha1.ReasonServingNotFound, "no Deployment"},
		{"missing Deployment beats missing fallback", lineObservation{servingMissing: "no Deployment", fallbackMissing: "no rules"}, nil, v1alpha1.ReasonServingNotFound, "no Deployment"},
		{"missing fallback", lineObservation{fallbackMissing: "no rules"}, nil, v1alpha1.ReasonFallbackNotFound, "no rules"},
		{"a permission refused", lineObservation{}, forbidden, v1alpha1.ReasonPermissionDenied, `cannot create resource "jobs"`},
		{"a spec problem beats a permission", lineObservation{problems: bad}, forbidden, v1alpha1.ReasonInvalidSpec, "spec.schedule.cron"},
		{"an error that is not a refusal", lineObservation{}, transient, "", ""},
	}
	for _, tc := range cases {
		c := setupProblem(tc.obs, tc.err)
		switch {
		case tc.wantReason == "" && c != nil:
			t.Errorf("%s: got problem %s %q; want none", tc.name, c.Reason, c.Message)
		case tc.wantReason == "":
		case c == nil:
			t.Errorf("%s: got no problem; want %s", tc.name, tc.wantReason)
		case c.Type != v1alpha1.ConditionReady || c.Status != metav1.ConditionFalse || c.Reason != tc.wantReason || !strings.Contains(c.Message, tc.wantText):
			t.Errorf("%s: got %s=%s/%s %q; want False/%s containing %q", tc.name, c.Type, c.Status, c.Reason, c.Message, tc.wantReason, tc.wantText)
		}
	}
}

// lineCond is a condition for the attention tests.
func lineCond(typ string, status metav1.ConditionStatus, reason, msg string) metav1.Condition {
	return metav1.Condition{Type: typ, Status: status, Reason: reason, Message: msg}
}

// ActionRequired is True exactly when a person must act, and Ready is True
// exactly when a version serves unattended with nothing waiting: the two
// are read together, so one table holds both.
func TestActionRequiredAndReady(t *testing.T) {
	setup := &metav1.Condition{Type: v1alpha1.ConditionReady, Status: metav1.ConditionFalse, Reason: v1alpha1.ReasonServingNotFound, Message: `Deployment "scorer" not found`}
	live := modelVersion("late-risk-v1", 0, v1alpha1.PhaseLive, v1alpha1.SourceTrained)
	waiting := lineCond(v1alpha1.ConditionAwaitingApproval, metav1.ConditionTrue, reasonWaitingDecision, "version late-risk-v2 passed the gate and waits for a person")
	review := lineCond(v1alpha1.ConditionNeedsReview, metav1.ConditionTrue, reasonNoFallback, "there is nothing to fall back to")
	blocked := lineCond(v1alpha1.ConditionBlocked, metav1.ConditionTrue, outcomeDataQuality, "address_line1 null rate 0.30")
	lateRegression := lineCond(v1alpha1.ConditionDegraded, metav1.ConditionTrue, reasonRegressedLate, "its probation ended")
	regressing := lineCond(v1alpha1.ConditionDegraded, metav1.ConditionTrue, reasonRegressed, "switching to late-risk-v0")
	checksUnknown := lineCond(v1alpha1.ConditionBlocked, metav1.ConditionUnknown, outcomeChecksUnknown, "Prometheus unreachable")
	retraining := lineCond(v1alpha1.ConditionRetraining, metav1.ConditionTrue, string(v1alpha1.PhaseTraining), "version late-risk-v2")
	fallback := lineCond(v1alpha1.ConditionFallbackActive, metav1.ConditionTrue, v1alpha1.ReasonRolledBack, "late-risk-v0 serves")
	cases := []struct {
		name       string
		setup      *metav1.Condition
		suspended  bool
		live       *v1alpha1.ModelVersion
		conds      []metav1.Condition
		wantAction string // ActionRequired's reason when True; empty when False
		wantReady  string // Ready's reason (True only for Serving)
		wantText   []string
	}{
		{"serving unattended", nil, false, live, nil, "", v1alpha1.ReasonServing, []string{"late-risk-v1 serves"}},
		{"a retrain under way keeps a line ready", nil, false, live, []metav1.Condition{retraining}, "", v1alpha1.ReasonServing, nil},
		{"a fallback serving keeps a line ready", nil, false, live, []metav1.Condition{fallback}, "", v1alpha1.ReasonServing, nil},
		{"nothing live yet", nil, false, nil, []metav1.Condition{retraining}, "", v1alpha1.ReasonNothingLive, nil},
		{"suspended", nil, true, live, nil, "", v1alpha1.ReasonSuspended, []string{"spec.suspend"}},
		{"a candidate waits", nil, false, live, []metav1.Condition{waiting}, v1alpha1.ConditionAwaitingApproval, v1alpha1.ConditionAwaitingApproval, []string{"late-risk-v2 passed the gate"}},
		{"a first candidate waits with nothing live", nil, false, nil, []metav1.Condition{waiting}, v1alpha1.ConditionAwaitingApproval, v1alpha1.ConditionAwaitingApproval, nil},
		{"a suspended line's waiting candidate still needs a person", nil, true, live, []metav1.Condition{waiting}, v1alpha1.ConditionAwaitingApproval, v1alpha1.ConditionAwaitingApproval, nil},
		{"needs review", nil, false, live, []metav1.Condition{review}, v1alpha1.ConditionNeedsReview, v1alpha1.ConditionNeedsReview, []string{"NeedsReview (NoFallback)"}},
		{"blocked on broken data", nil, false, live, []metav1.Condition{blocked}, v1alpha1.ConditionBlocked, v1alpha1.ConditionBlocked, []string{"address_line1"}},
		{"checks that cannot be judged wait on their own", nil, false, live, []metav1.Condition{checksUnknown}, "", v1alpha1.ReasonServing, nil},
		{"a regression after probation", nil, false, live, []metav1.Condition{lateRegression}, reasonRegressedLate, reasonRegressedLate, []string{"probation ended"}},
		{"a regression the guard is answering", nil, false, live, []metav1.Condition{regressing}, "", v1alpha1.ConditionDegraded, []string{"switching to late-risk-v0"}},
		{"a setup problem comes first", setup, false, live, []metav1.Condition{waiting, blocked}, v1alpha1.ReasonServingNotFound, v1alpha1.ReasonServingNotFound, []string{`Deployment "scorer" not found`}},
		{"every cause is listed", nil, false, live, []metav1.Condition{blocked, review, waiting}, v1alpha1.ConditionAwaitingApproval, v1alpha1.ConditionAwaitingApproval,
			[]string{"AwaitingApproval (WaitingForDecision)", "NeedsReview (NoFallback)", "Blocked (DataQualityIssue)"}},
	}
	for _, tc := range cases {
		conds := slices.Clone(tc.conds)
		a := actionRequiredCondition(conds, tc.setup)
		conds = append(conds, a)
		r := readyCondition(tc.suspended, tc.setup, conds, tc.live)
		if a.Type != v1alpha1.ConditionActionRequired || r.Type != v1alpha1.ConditionReady {
			t.Fatalf("%s: types %s, %s", tc.name, a.Type, r.Type)
		}
		switch {
		case tc.wantAction == "" && a.Status != metav1.ConditionFalse:
			t.Errorf("%s: ActionRequired=%s/%s %q; want False", tc.name, a.Status, a.Reason, a.Message)
		case tc.wantAction != "" && (a.Status != metav1.ConditionTrue || a.Reason != tc.wantAction):
			t.Errorf("%s: ActionRequired=%s/%s; want True/%s", tc.name, a.Status, a.Reason, tc.wantAction)
		}
		wantStatus := metav1.ConditionFalse
		if tc.wantReady == v1alpha1.ReasonServing {
			wantStatus = metav1.ConditionTrue
		}
		if r.Status != wantStatus || r.Reason != tc.wantReady {
			t.Errorf("%s: Ready=%s/%s %q; want %s/%s", tc.name, r.Status, r.Reason, r.Message, wantStatus, tc.wantReady)
		}
		for _, w := range tc.wantText {
			if !strings.Contains(r.Message+" | "+a.Message, w) {
				t.Errorf("%s: messages %q | %q lack %q", tc.name, r.Message, a.Message, w)
			}
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

// A Degraded verdict on a version that no longer serves says nothing of the
// line now: once the guard's switch has gone live, Ready does not wait for
// the guard to judge the new live version (when it would be, depends on
// timing, and a restart must not change what Ready says).
func TestStaleDegradedIsNotRead(t *testing.T) {
	now := metav1.NewTime(passStart)
	v0 := modelVersion("late-risk-v0", 0, v1alpha1.PhaseLive, v1alpha1.SourceImported)
	for _, c := range []struct {
		name    string
		guardOn string
		want    string
	}{
		{"the guard judged the version that was switched away from", "late-risk-v2", "True/Serving"},
		{"the guard judged the live version", "late-risk-v0", "False/Degraded"},
		{"the guard has judged nothing", "", "True/Serving"},
	} {
		line := passLine()
		line.Status.Conditions = []metav1.Condition{lineCond(v1alpha1.ConditionDegraded, metav1.ConditionTrue, reasonRegressed, "late-risk-v2 regressed; switching to late-risk-v0")}
		if c.guardOn != "" {
			line.Status.Guard = &v1alpha1.TriggerStatus{Name: c.guardOn, State: v1alpha1.TriggerFiring}
		}
		setAttention(line, nil, v0, now)
		r := meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionReady)
		if got := string(r.Status) + "/" + r.Reason; got != c.want {
			t.Errorf("%s: Ready %s, want %s", c.name, got, c.want)
		}
		if d := meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionDegraded); d == nil || d.Status != metav1.ConditionTrue {
			t.Errorf("%s: setAttention changed Degraded: %+v", c.name, d)
		}
	}
}
