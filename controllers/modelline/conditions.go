package modelline

import (
	"fmt"
	"slices"
	"strings"
	"time"

	apierrors "k8s.io/apimachinery/pkg/api/errors"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/runtime"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/speccheck"
	"plumbline.dev/plumbline/internal/engine/text"
)

// setCondition sets c in conds, stamping observedGeneration, and taking the
// transition time from the injected clock when the status changed (the
// apimachinery helper would read the wall clock). It reports whether the
// status, reason or message changed: the cases worth an event.
func setCondition(conds *[]metav1.Condition, c metav1.Condition, generation int64, now metav1.Time) bool {
	c.ObservedGeneration = generation
	old := meta.FindStatusCondition(*conds, c.Type)
	changed := old == nil || old.Status != c.Status || old.Reason != c.Reason || old.Message != c.Message
	if old == nil || old.Status != c.Status {
		c.LastTransitionTime = now
	} else {
		c.LastTransitionTime = old.LastTransitionTime
	}
	meta.SetStatusCondition(conds, c)
	return changed
}

// conditionIs reports whether conds holds condition t with status s.
func conditionIs(conds []metav1.Condition, t string, s metav1.ConditionStatus) bool {
	c := meta.FindStatusCondition(conds, t)
	return c != nil && c.Status == s
}

// setConditionSticky is setCondition for conditions whose message carries a
// live measurement: while the status and reason hold, the message seen when
// they last changed is kept, so an evaluation that finds nothing new writes
// nothing. It reports whether the status or reason changed.
func setConditionSticky(conds *[]metav1.Condition, c metav1.Condition, generation int64, now metav1.Time) bool {
	if old := meta.FindStatusCondition(*conds, c.Type); old != nil && old.Status == c.Status && old.Reason == c.Reason {
		c.Message = old.Message
	}
	return setCondition(conds, c, generation, now)
}

// permissionDenied is the Ready condition of a line the manager lacks a
// permission for: the API server's refusal names the verb, the resource and
// the namespace.
func permissionDenied(err error) metav1.Condition {
	return metav1.Condition{Type: v1alpha1.ConditionReady, Status: metav1.ConditionFalse, Reason: v1alpha1.ReasonPermissionDenied,
		Message: text.Truncate(fmt.Sprintf("the API server refused the manager a request this line needs: %v; grant it to the manager's ServiceAccount (config/rbac holds the ClusterRole generated from the code's RBAC markers; kubectl auth can-i --as=system:serviceaccount:NAMESPACE:NAME checks it); the line tries again every %s", err, permissionRetry), 2000)}
}

// setupProblem is what keeps the controller from acting on the line at all,
// as the Ready condition it makes: spec problems first (a person must edit
// the line), then a missing Deployment or fallback (something else must
// appear), then a permission the API server refused the manager (err, the
// pass's error, when it is one). Nil when there is none.
func setupProblem(obs lineObservation, err error) *metav1.Condition {
	c := &metav1.Condition{Type: v1alpha1.ConditionReady, Status: metav1.ConditionFalse}
	switch {
	case len(obs.problems) > 0:
		c.Reason, c.Message = v1alpha1.ReasonInvalidSpec, speccheck.Join(obs.problems)
	case obs.servingMissing != "":
		c.Reason, c.Message = v1alpha1.ReasonServingNotFound, obs.servingMissing
	case obs.fallbackMissing != "":
		c.Reason, c.Message = v1alpha1.ReasonFallbackNotFound, obs.fallbackMissing
	case apierrors.IsForbidden(err):
		d := permissionDenied(err)
		return &d
	default:
		return nil
	}
	return c
}

// isSetupReason reports whether a Ready reason is a setup problem's.
func isSetupReason(reason string) bool {
	switch reason {
	case v1alpha1.ReasonInvalidSpec, v1alpha1.ReasonServingNotFound, v1alpha1.ReasonFallbackNotFound, v1alpha1.ReasonPermissionDenied:
		return true
	}
	return false
}

// actionRequiredCondition is True exactly when a person must act on the
// line, and says what: a setup problem (edit the line, create what it names,
// grant a permission), a candidate waiting for a decision, a question the
// controller leaves to a person (NeedsReview), a retrain refused on broken
// data (Blocked), or a regression after probation, which nothing rolls back
// automatically. Its reason is the first of these; its message lists them
// all. It reads the line's other conditions, so it is computed after them.
func actionRequiredCondition(conds []metav1.Condition, setup *metav1.Condition) metav1.Condition {
	type cause struct{ reason, message string }
	var causes []cause
	if setup != nil {
		causes = append(causes, cause{setup.Reason, setup.Message})
	}
	for _, w := range []struct {
		cond    string
		reasons []string // any reason when empty
	}{
		{v1alpha1.ConditionAwaitingApproval, nil},
		{v1alpha1.ConditionNeedsReview, nil},
		{v1alpha1.ConditionBlocked, nil},
		{v1alpha1.ConditionDegraded, []string{reasonRegressedLate}},
	} {
		c := meta.FindStatusCondition(conds, w.cond)
		if !isTrue(c) || (w.reasons != nil && !slices.Contains(w.reasons, c.Reason)) {
			continue
		}
		reason := w.cond
		if w.cond == v1alpha1.ConditionDegraded {
			reason = c.Reason
		}
		causes = append(causes, cause{reason, fmt.Sprintf("%s (%s): %s", w.cond, c.Reason, c.Message)})
	}
	if len(causes) == 0 {
		return metav1.Condition{Type: v1alpha1.ConditionActionRequired, Status: metav1.ConditionFalse, Reason: v1alpha1.ReasonNothingRequired,
			Message: "nothing waits for a person"}
	}
	msgs := make([]string, len(causes))
	for i, c := range causes {
		msgs[i] = c.message
	}
	return metav1.Condition{Type: v1alpha1.ConditionActionRequired, Status: metav1.ConditionTrue, Reason: causes[0].reason,
		Message: text.Truncate(strings.Join(msgs, "; "), 2000)}
}

// readyCondition is the line's Ready condition: True exactly when a version
// serves, the controller runs the line unattended and nothing waits for a
// person; otherwise False with the first thing in the way: a setup problem,
// what a person must do (ActionRequired's reason), suspension, a degraded
// live version, or no version live yet. A retrain under way does not make a
// line unready: the live version serves meanwhile. conds are the line's
// other conditions, computed first.
func readyCondition(suspended bool, setup *metav1.Condition, conds []metav1.Condition, live *v1alpha1.ModelVersion) metav1.Condition {
	if setup != nil {
		return *setup
	}
	c := metav1.Condition{Type: v1alpha1.ConditionReady, Status: metav1.ConditionFalse}
	action := meta.FindStatusCondition(conds, v1alpha1.ConditionActionRequired)
	degraded := meta.FindStatusCondition(conds, v1alpha1.ConditionDegraded)
	switch {
	case isTrue(action):
		c.Reason, c.Message = action.Reason, "a person must act: "+action.Message
	case suspended:
		c.Reason, c.Message = v1alpha1.ReasonSuspended, "spec.suspend is true: the controller reports status but does not act on this line"
	case isTrue(degraded):
		c.Reason, c.Message = v1alpha1.ConditionDegraded, degraded.Message
	case live == nil:
		c.Reason, c.Message = v1alpha1.ReasonNothingLive, "no version serves yet"
	default:
		c.Status, c.Reason = metav1.ConditionTrue, v1alpha1.ReasonServing
		c.Message = live.Name + " serves, and nothing waits for a person"
	}
	return c
}

// fallbackCondition is True while the line serves something other than its
// newest promoted candidate: a version the guard rolled back to, the
// rule-based version, an alternative, or a version a person went back to.
func fallbackCondition(vw *view) metav1.Condition {
	c := metav1.Condition{Type: v1alpha1.ConditionFallbackActive, Status: metav1.ConditionFalse, Reason: "ServingCandidate", Message: "the line serves its latest promoted version"}
	live := vw.live()
	if live == nil {
		c.Reason, c.Message = v1alpha1.ReasonNothingLive, "no version serves yet"
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
		what := "passed the gate"
		if a.Status.Gate == nil {
			what = "is the line's first (imported, not gated)"
		}
		c.Message = fmt.Sprintf("version %s %s and waits for a person: kubectl plumbline approve %s -n %s (or reject %s), which sets spec.decision", a.Name, what, a.Name, a.Namespace, a.Name)
	}
	return c
}

// The line's conditions and their one writer each:
//
//	Ready            readyCondition, from the setup (setupProblem: spec,
//	                 serving Deployment, fallback, a permission the API
//	                 server refused the manager), suspension, the live
//	                 version and the conditions below; written last
//	ActionRequired   actionRequiredCondition, from the setup and the
//	                 conditions below; written after them
//	Retraining       retrainingCondition, from the versions
//	AwaitingApproval awaitingApprovalCondition, from the versions
//	FallbackActive   fallbackCondition, from the versions
//	Degraded         judgeConditions, from the guard's judgements
//	Blocked          judgeConditions, from the start decisions' judgements
//	NeedsReview      judgeConditions, from the judgements of the guard,
//	                 the alternatives, the start decisions and the triggers
//	                 falling quiet
//
// A version's conditions have theirs in versionconditions.go.

// A judgement is what a phase found that one of the conditions Degraded,
// Blocked and NeedsReview reports. Phases record judgements in the pass,
// in the order found, and judgeConditions turns them into the conditions
// once, after the last phase; the producers (startJudgements,
// guardJudgements, ...) are pure functions of what the phase decided.
type judgement struct {
	cond            string
	status          metav1.ConditionStatus
	reason, message string
	// sticky keeps the message seen when the status and reason last
	// changed, so a message carrying a live measurement does not rewrite
	// the status at every evaluation.
	sticky bool
	// onlyWhile applies the judgement only while the condition has one of
	// these reasons: a recovery withdraws only what it answers.
	onlyWhile []string
	// event tells of the judgement when it changes the condition's status
	// or reason.
	event *event
}

// judgeConditions applies judgements to the conditions in order, and
// returns the events of those that changed one.
func judgeConditions(conds *[]metav1.Condition, js []judgement, generation int64, now metav1.Time) []event {
	var out []event
	for _, j := range js {
		if len(j.onlyWhile) > 0 {
			if c := meta.FindStatusCondition(*conds, j.cond); c == nil || !slices.Contains(j.onlyWhile, c.Reason) {
				continue
			}
		}
		c := metav1.Condition{Type: j.cond, Status: j.status, Reason: j.reason, Message: text.Truncate(j.message, 2000)}
		changed := false
		if j.sticky {
			changed = setConditionSticky(conds, c, generation, now)
		} else {
			changed = setCondition(conds, c, generation, now)
		}
		if changed && j.event != nil {
			out = append(out, *j.event)
		}
	}
	return out
}

// lineEvent is an event about the line, told by action.
func lineEvent(line *v1alpha1.ModelLine, related runtime.Object, action, kind, reason, message string) *event {
	return &event{regarding: line, related: related, kind: kind, reason: reason, message: message, action: action}
}

func isTrue(c *metav1.Condition) bool { return c != nil && c.Status == metav1.ConditionTrue }
