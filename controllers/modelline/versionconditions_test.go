package modelline

import (
	"fmt"
	"strings"
	"testing"
	"time"

	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/client/interceptor"

	"plumbline.dev/plumbline/api/v1alpha1"
)

func show(c *metav1.Condition) string {
	if c == nil {
		return "-"
	}
	return fmt.Sprintf("%s/%s", c.Status, c.Reason)
}

// Each version condition is a function of the version's record; nil where
// the record does not decide.
func TestVersionConditions(t *testing.T) {
	passed := &v1alpha1.GateResult{Verdict: v1alpha1.GatePassed, Reason: "CriteriaMet", Message: "all 2 criteria met"}
	failed := &v1alpha1.GateResult{Verdict: v1alpha1.GateFailed, Reason: "CriteriaNotMet", Message: "roc_auc below"}
	noReport := &v1alpha1.GateResult{Verdict: v1alpha1.GateFailed, Reason: "ReportMissing", Message: "no report"}
	mk := func(source v1alpha1.VersionSource, phase v1alpha1.VersionPhase, reason string, mut func(*v1alpha1.ModelVersion)) *v1alpha1.ModelVersion {
		v := &v1alpha1.ModelVersion{Spec: v1alpha1.ModelVersionSpec{Source: source, ArtifactURI: "s3://m/1"},
			Status: v1alpha1.ModelVersionStatus{Phase: phase, Reason: reason, Message: "the record's message"}}
		if mut != nil {
			mut(v)
		}
		return v
	}
	trainJob := func(v *v1alpha1.ModelVersion) { v.Status.TrainingJob = "v1-train" }
	gated := func(g *v1alpha1.GateResult) func(*v1alpha1.ModelVersion) {
		return func(v *v1alpha1.ModelVersion) { trainJob(v); v.Status.GateJob = "v1-gate"; v.Status.Gate = g }
	}
	manual := &v1alpha1.ModelLine{Spec: v1alpha1.ModelLineSpec{Gate: v1alpha1.GateSpec{Approval: v1alpha1.ApprovalManual}}}
	automatic := &v1alpha1.ModelLine{}
	cases := []struct {
		name                                       string
		line                                       *v1alpha1.ModelLine
		v                                          *v1alpha1.ModelVersion
		trained, evaluated, gatePassed, appr, live string
	}{
		{"queued", automatic, mk(v1alpha1.SourceTrained, v1alpha1.PhasePending, "Queued", nil), "-", "-", "-", "-", "-"},
		{"training", automatic, mk(v1alpha1.SourceTrained, v1alpha1.PhaseTraining, "TrainingStarted", trainJob), "Unknown/TrainingStarted", "-", "-", "-", "-"},
		{"training failed", automatic, mk(v1alpha1.SourceTrained, v1alpha1.PhaseFailed, "BackoffLimitExceeded", trainJob), "False/BackoffLimitExceeded", "-", "-", "-", "-"},
		{"no spec.training", automatic, mk(v1alpha1.SourceTrained, v1alpha1.PhaseFailed, "NoTraining", nil), "False/NoTraining", "-", "-", "-", "-"},
		{"training Job name taken", automatic, mk(v1alpha1.SourceTrained, v1alpha1.PhaseFailed, reasonJobNameTaken, nil), "-", "-", "-", "-", "-"},
		{"rejected while training", manual, mk(v1alpha1.SourceTrained, v1alpha1.PhaseRejected, reasonRejectedByPerson, trainJob), "-", "-", "-", "False/RejectedByPerson", "-"},
		{"evaluating", automatic, mk(v1alpha1.SourceTrained, v1alpha1.PhaseEvaluating, "EvaluationStarted", func(v *v1alpha1.ModelVersion) { trainJob(v); v.Status.GateJob = "v1-gate" }),
			"True/TrainingSucceeded", "Unknown/EvaluationStarted", "-", "-", "-"},
		{"gate Job name taken after training", automatic, mk(v1alpha1.SourceTrained, v1alpha1.PhaseFailed, reasonJobNameTaken, trainJob), "True/TrainingSucceeded", "-", "-", "-", "-"},
		{"gate failed", automatic, mk(v1alpha1.SourceTrained, v1alpha1.PhaseRejected, "CriteriaNotMet", gated(failed)), "True/TrainingSucceeded", "True/CriteriaNotMet", "False/CriteriaNotMet", "-", "-"},
		{"no report", automatic, mk(v1alpha1.SourceTrained, v1alpha1.PhaseRejected, "ReportMissing", gated(noReport)), "True/TrainingSucceeded", "False/ReportMissing", "False/ReportMissing", "-", "-"},
		{"waiting for a person", manual, mk(v1alpha1.SourceTrained, v1alpha1.PhaseAwaitingApproval, reasonWaitingDecision, gated(passed)),
			"True/TrainingSucceeded", "True/CriteriaMet", "True/CriteriaMet", "Unknown/WaitingForDecision", "-"},
		{"approved, rolling out", manual, mk(v1alpha1.SourceTrained, v1alpha1.PhasePromoting, reasonApprovedByPerson, func(v *v1alpha1.ModelVersion) {
			gated(passed)(v)
			v.Spec.Decision, v.Status.DecisionTime = v1alpha1.DecisionApproved, &metav1.Time{}
		}), "True/TrainingSucceeded", "True/CriteriaMet", "True/CriteriaMet", "True/ApprovedByPerson", "Unknown/RollingOut"},
		{"automatic, live", automatic, mk(v1alpha1.SourceTrained, v1alpha1.PhaseLive, reasonPromoted, gated(passed)),
			"True/TrainingSucceeded", "True/CriteriaMet", "True/CriteriaMet", "True/ApprovedAutomatically", "True/Promoted"},
		{"rolled back", automatic, mk(v1alpha1.SourceTrained, v1alpha1.PhaseArchived, v1alpha1.ReasonRolledBack, gated(passed)),
			"True/TrainingSucceeded", "True/CriteriaMet", "True/CriteriaMet", "True/ApprovedAutomatically", "False/RolledBack"},
		{"rollout failed", automatic, mk(v1alpha1.SourceTrained, v1alpha1.PhaseFailed, reasonRolloutFailed, gated(passed)),
			"True/TrainingSucceeded", "True/CriteriaMet", "True/CriteriaMet", "True/ApprovedAutomatically", "False/RolloutFailed"},
		{"the first imported version going live", automatic, mk(v1alpha1.SourceImported, v1alpha1.PhasePromoting, reasonInitial, nil), "-", "-", "-", "-", "Unknown/RollingOut"},
		{"the rules in reserve, never served", automatic, mk(v1alpha1.SourceRuleBased, v1alpha1.PhaseStandby, reasonStandby, nil), "-", "-", "-", "-", "-"},
		{"the rules back in reserve", automatic, mk(v1alpha1.SourceRuleBased, v1alpha1.PhaseStandby, reasonStandby, func(v *v1alpha1.ModelVersion) {
			v.Status.Conditions = []metav1.Condition{{Type: v1alpha1.ConditionLive, Status: metav1.ConditionTrue, Reason: reasonPromoted}}
		}), "-", "-", "-", "-", "False/FallbackInReserve"},
	}
	for _, c := range cases {
		got := []string{show(trainedCondition(c.v)), show(evaluatedCondition(c.v)), show(gatePassedCondition(c.v)), show(approvedCondition(c.line, c.v)), show(liveCondition(c.v))}
		want := []string{c.trained, c.evaluated, c.gatePassed, c.appr, c.live}
		if strings.Join(got, " ") != strings.Join(want, " ") {
			t.Errorf("%s:\n got Trained Evaluated GatePassed Approved Live = %v\nwant %v", c.name, got, want)
		}
		// Settled: True exactly when the version's way has ended, its phase
		// the reason.
		wantSettled := "False/" + string(c.v.Status.Phase)
		if !c.v.Status.Phase.InFlight() {
			wantSettled = "True/" + string(c.v.Status.Phase)
		}
		if got := show(settledCondition(c.v)); got != wantSettled {
			t.Errorf("%s: Settled %s, want %s", c.name, got, wantSettled)
		}
	}
	if got := show(settledCondition(&v1alpha1.ModelVersion{})); got != "False/Pending" {
		t.Errorf("a new version: Settled %s, want False/Pending", got)
	}
}

// The conditions move with a version through its life, on whole passes:
// a Manual line's candidate trained, gated, approved and rolled out.
func TestVersionConditionsThroughALife(t *testing.T) {
	line := passLine()
	line.Spec.Gate.Approval = v1alpha1.ApprovalManual
	v0 := modelVersion("late-risk-v0", 0, v1alpha1.PhaseLive, v1alpha1.SourceImported)
	v0.Status.PromotedTime = at(-time.Hour)
	v0.Status.Promotion = &v1alpha1.PromotionStatus{Sequence: 1}
	w := newWorld(t, interceptor.Funcs{}, line, v0, scorerDeployment("late-risk-v0", v0.Spec.ArtifactURI))
	conds := func() string {
		v := w.version("late-risk-v1")
		var out []string
		for _, typ := range []string{v1alpha1.ConditionTrained, v1alpha1.ConditionEvaluated, v1alpha1.ConditionGatePassed, v1alpha1.ConditionApproved, v1alpha1.ConditionLive} {
			out = append(out, typ+"="+show(meta.FindStatusCondition(v.Status.Conditions, typ)))
		}
		return strings.Join(out, " ")
	}
	expect := func(step, want string) {
		t.Helper()
		if got := conds(); got != want {
			t.Fatalf("%s:\n got %s\nwant %s", step, got, want)
		}
	}
	// The line is Ready while the old version serves and the candidate
	// trains; it needs a person exactly while the candidate waits.
	attention := func(step, want string) {
		t.Helper()
		l := w.line()
		got := "Ready=" + show(meta.FindStatusCondition(l.Status.Conditions, v1alpha1.ConditionReady)) +
			" ActionRequired=" + show(meta.FindStatusCondition(l.Status.Conditions, v1alpha1.ConditionActionRequired))
		if got != want {
			t.Errorf("%s: line %s, want %s", step, got, want)
		}
	}
	w.annotate(v1alpha1.RetrainRequestAnnotation, "ops-1")
	w.mustPass()
	expect("training", "Trained=Unknown/TrainingStarted Evaluated=- GatePassed=- Approved=- Live=-")
	attention("training", "Ready=True/Serving ActionRequired=False/NothingRequired")
	w.finishJob("late-risk-v1-train", true, "")
	w.mustPass()
	expect("evaluating", "Trained=True/TrainingSucceeded Evaluated=Unknown/EvaluationStarted GatePassed=- Approved=- Live=-")
	w.finishJob("late-risk-v1-gate", true, passingGateReport())
	w.mustPass()
	expect("waiting", "Trained=True/TrainingSucceeded Evaluated=True/CriteriaMet GatePassed=True/CriteriaMet Approved=Unknown/WaitingForDecision Live=-")
	attention("waiting", "Ready=False/AwaitingApproval ActionRequired=True/AwaitingApproval")
	if c := meta.FindStatusCondition(w.version("late-risk-v1").Status.Conditions, v1alpha1.ConditionSettled); c == nil || c.Status != metav1.ConditionFalse || c.Reason != "AwaitingApproval" {
		t.Errorf("Settled %+v while a person decides", c)
	}
	v1 := w.version("late-risk-v1")
	orig := v1.DeepCopy()
	v1.Spec.Decision, v1.Spec.DecisionNote = v1alpha1.DecisionApproved, "looked at the depots"
	if err := w.c.Patch(t.Context(), v1, client.MergeFrom(orig)); err != nil {
		t.Fatal(err)
	}
	w.mustPass()
	expect("approved", "Trained=True/TrainingSucceeded Evaluated=True/CriteriaMet GatePassed=True/CriteriaMet Approved=True/ApprovedByPerson Live=Unknown/RollingOut")
	if c := meta.FindStatusCondition(w.version("late-risk-v1").Status.Conditions, v1alpha1.ConditionApproved); c.Message != "looked at the depots" {
		t.Errorf("Approved message %q, want the person's note", c.Message)
	}
	w.mustPass() // patches the Deployment
	w.rolledOut()
	w.mustPass()
	expect("live", "Trained=True/TrainingSucceeded Evaluated=True/CriteriaMet GatePassed=True/CriteriaMet Approved=True/ApprovedByPerson Live=True/Promoted")
	attention("live", "Ready=True/Serving ActionRequired=False/NothingRequired")
	if c := meta.FindStatusCondition(w.version("late-risk-v1").Status.Conditions, v1alpha1.ConditionSettled); c == nil || c.Status != metav1.ConditionTrue || c.Reason != "Live" {
		t.Errorf("Settled %+v once live", c)
	}
	if c := meta.FindStatusCondition(w.version("late-risk-v0").Status.Conditions, v1alpha1.ConditionLive); c == nil || c.Status != metav1.ConditionFalse || c.Reason != reasonReplaced {
		t.Errorf("the replaced version's Live: %+v", c)
	}
}
