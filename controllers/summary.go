package controllers

import (
	"fmt"
	"strconv"
	"time"

	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// summarize derives the line's status from its versions: which is live and
// which served before it, the last promotion and retrain, the version count,
// and the Retraining and AwaitingApproval conditions. The versions are the
// record; the line's status is a view of them.
func summarize(line *v1alpha1.ModelLine, vw *view, now metav1.Time) {
	st := &line.Status
	st.LiveVersion, st.PreviousVersion = "", ""
	if live := vw.live(); live != nil {
		st.LiveVersion = live.Name
		if live.Status.Promotion != nil {
			st.PreviousVersion = live.Status.Promotion.FromVersion
		}
		if t := live.Status.PromotedTime; t != nil && (st.LastPromotionTime == nil || st.LastPromotionTime.Before(t)) {
			st.LastPromotionTime = t.DeepCopy()
		}
	}
	st.ActiveVersion = ""
	if a := vw.active(); a != nil {
		st.ActiveVersion = a.Name
	}
	for _, v := range vw.versions {
		if n, err := strconv.ParseInt(v.Labels[numberLabel], 10, 32); err == nil && int32(n) > st.VersionCount {
			st.VersionCount = int32(n)
		}
		// A version's data window ends when its training started: the
		// line's last retrain is the newest of those, and nothing else
		// writes it.
		if t := v.Status.DataTo; t != nil && (st.LastRetrainTime == nil || st.LastRetrainTime.Before(t)) {
			st.LastRetrainTime = t.DeepCopy()
		}
	}
	if last := lastAutomaticRollback(vw); last != nil {
		st.LastRollbackTime = &metav1.Time{Time: *last}
	}
	setCondition(&st.Conditions, retrainingCondition(vw), line.Generation, now)
	setCondition(&st.Conditions, awaitingApprovalCondition(vw), line.Generation, now)
	setCondition(&st.Conditions, fallbackCondition(vw), line.Generation, now)
}

// fallbackCondition is True while the line serves something other than its
// newest promoted candidate: a version the guard rolled back to, the
// rule-based version, an alternative, or a version a person went back to.
func fallbackCondition(vw *view) metav1.Condition {
	c := metav1.Condition{Type: v1alpha1.ConditionFallbackActive, Status: metav1.ConditionFalse, Reason: "ServingCandidate", Message: "the line serves its latest promoted version"}
	live := vw.live()
	if live == nil {
		c.Reason, c.Message = "NothingLive", "no version serves yet"
		return c
	}
	kind := promotionKind(live)
	if kind == v1alpha1.PromotionCandidate && live.Spec.Source != v1alpha1.SourceRuleBased {
		return c
	}
	since := ""
	if t := live.Status.PromotedTime; t != nil {
		since = " since " + t.UTC().Format(time.RFC3339)
	}
	from := ""
	if live.Status.Promotion != nil && live.Status.Promotion.FromVersion != "" {
		from = " in place of " + live.Status.Promotion.FromVersion
	}
	c.Status = metav1.ConditionTrue
	switch kind {
	case v1alpha1.PromotionRollback:
		c.Reason = v1alpha1.ReasonRolledBack
	case v1alpha1.PromotionFallback:
		c.Reason = "RuleBasedFallback"
	case v1alpha1.PromotionAlternative:
		c.Reason = "Alternative"
	case v1alpha1.PromotionRequested:
		c.Reason = "RequestedRollback"
	default:
		c.Reason = "RuleBasedFallback"
	}
	c.Message = fmt.Sprintf("%s (%s) serves%s%s", live.Name, kind, from, since)
	return c
}

// retrainingCondition is True while a version is on its way and says where;
// False otherwise, with the outcome of the last version that finished.
func retrainingCondition(vw *view) metav1.Condition {
	c := metav1.Condition{Type: v1alpha1.ConditionRetraining}
	if a := vw.active(); a != nil {
		queued := 0
		for _, v := range vw.versions {
			if v != a && v.Spec.Source != v1alpha1.SourceRuleBased && v.Status.Phase.InFlight() {
				queued++
			}
		}
		phase := a.Status.Phase
		if phase == "" {
			phase = v1alpha1.PhasePending
		}
		c.Status, c.Reason = metav1.ConditionTrue, string(phase)
		c.Message = fmt.Sprintf("version %s: %s", a.Name, orNone(a.Status.Message))
		if queued > 0 {
			c.Message += fmt.Sprintf(" (%d more queued)", queued)
		}
		return c
	}
	var last *v1alpha1.ModelVersion
	for _, v := range vw.versions {
		if v.Spec.Source != v1alpha1.SourceRuleBased && (v.Status.Phase.Finished() || v.Status.Phase == v1alpha1.PhaseLive) {
			last = v // versions are oldest first
		}
	}
	c.Status = metav1.ConditionFalse
	if last == nil {
		c.Reason, c.Message = "NoRetrain", "no version has been trained or imported yet"
		return c
	}
	c.Reason = outcome(last)
	c.Message = fmt.Sprintf("version %s: %s", last.Name, last.Status.Message)
	return c
}

// outcome names how a finished version ended, for the line.
func outcome(v *v1alpha1.ModelVersion) string {
	switch v.Status.Phase {
	case v1alpha1.PhaseLive, v1alpha1.PhaseArchived:
		return "Promoted"
	case v1alpha1.PhaseRejected:
		if v.Status.Reason == reasonRejectedByPerson {
			return reasonRejectedByPerson
		}
		return "GateFailed"
	case v1alpha1.PhaseFailed:
		if v.Status.Reason == reasonRolloutFailed {
			return reasonRolloutFailed
		}
		return "TrainingFailed"
	}
	return string(v.Status.Phase)
}

// awaitingApprovalCondition is True while a candidate waits for a person.
func awaitingApprovalCondition(vw *view) metav1.Condition {
	c := metav1.Condition{Type: v1alpha1.ConditionAwaitingApproval, Status: metav1.ConditionFalse, Reason: "NothingWaiting", Message: "no candidate waits for a decision"}
	if a := vw.active(); a != nil && a.Status.Phase == v1alpha1.PhaseAwaitingApproval {
		c.Status, c.Reason = metav1.ConditionTrue, reasonWaitingDecision
		c.Message = fmt.Sprintf("version %s passed the gate and waits for a person: set spec.decision to Approved or Rejected (kubectl patch modelversion %s -n %s --type=merge -p '{\"spec\":{\"decision\":\"Approved\"}}')", a.Name, a.Name, a.Namespace)
	}
	return c
}
