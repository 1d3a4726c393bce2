package modelline

import (
	"fmt"

	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/contract/gatereport"
)

// A version's conditions, and their one writer each: a function of the
// version's record (its phase, reason and message, its Jobs, its gate
// result, the decision) as the pass leaves it. The phases write the record;
// versionConditions turns it into the conditions once, after the last
// phase. A function returns nil where the record does not decide (a
// version rejected while it trained keeps Trained as it was), and a
// condition keeps the message of its last change while its status and
// reason hold.
func versionConditions(line *v1alpha1.ModelLine, v *v1alpha1.ModelVersion, now metav1.Time) {
	for _, c := range []*metav1.Condition{trainedCondition(v), evaluatedCondition(v), gatePassedCondition(v), approvedCondition(line, v), liveCondition(v), settledCondition(v)} {
		if c != nil {
			setConditionSticky(&v.Status.Conditions, *c, v.Generation, now)
		}
	}
}

func cond(typ string, status metav1.ConditionStatus, reason, message string) *metav1.Condition {
	return &metav1.Condition{Type: typ, Status: status, Reason: reason, Message: message}
}

// trainedCondition: a Trained version's training, Unknown while its Job
// runs, True once it succeeded (the version went on to its gate or
// further), False when it failed.
func trainedCondition(v *v1alpha1.ModelVersion) *metav1.Condition {
	if v.Spec.Source != v1alpha1.SourceTrained {
		return nil
	}
	st := v.Status
	pastTraining := st.GateJob != "" || st.Gate != nil
	switch st.Phase {
	case v1alpha1.PhaseEvaluating, v1alpha1.PhaseAwaitingApproval, v1alpha1.PhasePromoting, v1alpha1.PhaseLive, v1alpha1.PhaseArchived:
		pastTraining = true
	case v1alpha1.PhaseFailed:
		// A rollout that failed, or a gate Job whose name was taken, came
		// after a training that succeeded.
		pastTraining = pastTraining || st.TrainingJob != "" && (st.Reason == reasonRolloutFailed || st.Reason == reasonJobNameTaken)
	}
	switch {
	case st.Phase == v1alpha1.PhaseTraining:
		return cond(v1alpha1.ConditionTrained, metav1.ConditionUnknown, reasonTrainingStarted, st.Message)
	case pastTraining:
		return cond(v1alpha1.ConditionTrained, metav1.ConditionTrue, "TrainingSucceeded", fmt.Sprintf("training Job %s succeeded; artifact %s", st.TrainingJob, v.Spec.ArtifactURI))
	case st.Phase == v1alpha1.PhaseFailed && st.Reason != reasonJobNameTaken:
		// No spec.training, the Job deleted, or the Job failed.
		return cond(v1alpha1.ConditionTrained, metav1.ConditionFalse, st.Reason, st.Message)
	}
	return nil
}

// evaluatedCondition: Unknown while the gate Job runs; then True when its
// report was read (whatever the verdict), False when there was nothing to
// judge (the Job failed or was deleted, or left no report).
func evaluatedCondition(v *v1alpha1.ModelVersion) *metav1.Condition {
	if g := v.Status.Gate; g != nil {
		status := metav1.ConditionTrue
		if g.Reason == reasonEvaluationFailed || g.Reason == reasonEvaluationLost || g.Reason == gatereport.ReasonMissing {
			status = metav1.ConditionFalse
		}
		return cond(v1alpha1.ConditionEvaluated, status, g.Reason, g.Message)
	}
	if v.Status.Phase == v1alpha1.PhaseEvaluating {
		return cond(v1alpha1.ConditionEvaluated, metav1.ConditionUnknown, "EvaluationStarted", v.Status.Message)
	}
	return nil
}

// gatePassedCondition: the gate's verdict.
func gatePassedCondition(v *v1alpha1.ModelVersion) *metav1.Condition {
	g := v.Status.Gate
	if g == nil {
		return nil
	}
	status := metav1.ConditionFalse
	if g.Verdict == v1alpha1.GatePassed {
		status = metav1.ConditionTrue
	}
	return cond(v1alpha1.ConditionGatePassed, status, g.Reason, g.Message)
}

// approvedCondition: waiting for a person; a person's decision; or the
// line's Automatic approval of a candidate that passed the gate.
func approvedCondition(line *v1alpha1.ModelLine, v *v1alpha1.ModelVersion) *metav1.Condition {
	st := v.Status
	switch {
	case st.Phase == v1alpha1.PhaseAwaitingApproval:
		return cond(v1alpha1.ConditionApproved, metav1.ConditionUnknown, reasonWaitingDecision, "waiting for spec.decision")
	case st.Phase == v1alpha1.PhaseRejected && st.Reason == reasonRejectedByPerson:
		return cond(v1alpha1.ConditionApproved, metav1.ConditionFalse, reasonRejectedByPerson, st.Message)
	case v.Spec.Decision == v1alpha1.DecisionApproved && st.DecisionTime != nil:
		return cond(v1alpha1.ConditionApproved, metav1.ConditionTrue, reasonApprovedByPerson, noteOr(v.Spec.DecisionNote, "approved by a person"))
	case st.Gate != nil && st.Gate.Verdict == v1alpha1.GatePassed && line.Spec.Gate.Approval != v1alpha1.ApprovalManual:
		return cond(v1alpha1.ConditionApproved, metav1.ConditionTrue, reasonApprovedAuto, "the line's approval is Automatic")
	}
	return nil
}

// liveCondition: rolling out, serving, or no longer serving (replaced,
// rolled back, back in reserve, or a rollout that failed).
func liveCondition(v *v1alpha1.ModelVersion) *metav1.Condition {
	st := v.Status
	switch st.Phase {
	case v1alpha1.PhasePromoting:
		return cond(v1alpha1.ConditionLive, metav1.ConditionUnknown, reasonRollingOut, st.Message)
	case v1alpha1.PhaseLive:
		return cond(v1alpha1.ConditionLive, metav1.ConditionTrue, reasonPromoted, st.Message)
	case v1alpha1.PhaseArchived:
		return cond(v1alpha1.ConditionLive, metav1.ConditionFalse, st.Reason, st.Message)
	case v1alpha1.PhaseStandby:
		// Back in reserve after it served; one that never served has no
		// Live condition.
		if meta.FindStatusCondition(st.Conditions, v1alpha1.ConditionLive) != nil {
			return cond(v1alpha1.ConditionLive, metav1.ConditionFalse, st.Reason, st.Message)
		}
	case v1alpha1.PhaseFailed:
		if st.Reason == reasonRolloutFailed {
			return cond(v1alpha1.ConditionLive, metav1.ConditionFalse, reasonRolloutFailed, st.Message)
		}
	}
	return nil
}

// settledCondition: False while the version is on its way (its phase the
// reason), True once its way has ended, whatever the outcome (the phase
// again): what a script waits on.
func settledCondition(v *v1alpha1.ModelVersion) *metav1.Condition {
	phase := v.Status.Phase
	if phase == "" {
		phase = v1alpha1.PhasePending
	}
	if phase.InFlight() {
		return cond(v1alpha1.ConditionSettled, metav1.ConditionFalse, string(phase), v.Status.Message)
	}
	return cond(v1alpha1.ConditionSettled, metav1.ConditionTrue, string(phase), v.Status.Message)
}
