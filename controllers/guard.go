package controllers

import (
	"context"
	"errors"
	"fmt"
	"math"
	"time"

	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/types"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/policy"
	"plumbline.dev/plumbline/internal/engine/promq"
	"plumbline.dev/plumbline/internal/engine/text"
	"plumbline.dev/plumbline/internal/engine/trigger"
)

// guardKey prefixes the guard's entry in the evaluation memory; trigger
// names cannot hold a colon, so the two never meet.
const guardKey = "guard:"

// Degraded condition reasons.
const (
	reasonGuardHealthy      = "Healthy"
	reasonGuardWatching     = "Watching"
	reasonGuardUnknown      = "GuardUnknown"
	reasonRegressed         = "Regressed"
	reasonRegressedLate     = "RegressedAfterProbation"
	reasonRollbackLimit     = "RollbackLimit"
	reasonNoFallback        = "NoFallback"
	reasonRollbackWaits     = "RollbackWaits"
	reasonSwitchingFallback = "SwitchingToFallback"
)

// evaluateGuard judges the guard on the live version when it is due, and
// returns the result (nil when it was not judged in this pass). The window
// only counts once it lies wholly after the promotion: before that the guard
// watches and does not judge.
func (r *ModelLineReconciler) evaluateGuard(ctx context.Context, line *v1alpha1.ModelLine, vw *view, p *pass) *trigger.Result {
	g := line.Spec.Guard
	live := vw.live()
	if g == nil || live == nil || live.Status.PromotedTime == nil {
		line.Status.Guard = nil
		return nil
	}
	key := types.NamespacedName{Namespace: line.Namespace, Name: line.Name}
	now := p.now.Time
	every := seconds(g.EverySeconds)
	if every <= 0 {
		every = time.Minute
	}
	name := guardKey + live.Name
	due, next := r.evals.due(key, line.Generation, name, every, now)
	if !due {
		p.wakeAt(next)
		return nil
	}
	w := trigger.Window{For: seconds(g.ForSeconds), Every: every, Coverage: r.Coverage}
	promoted := live.Status.PromotedTime.Time
	var res trigger.Result
	if firstFull := promoted.Add(w.For); now.Before(firstFull) {
		res = trigger.Result{State: v1alpha1.TriggerInactive, Value: math.NaN(),
			Message: fmt.Sprintf("watching %s since its promotion at %s; the first full %s window ends at %s", live.Name, promoted.UTC().Format(time.RFC3339), w.For, firstFull.UTC().Format(time.RFC3339))}
		p.wakeAt(firstFull)
	} else {
		series, err := r.Prometheus.Range(ctx, g.Query, now.Add(-w.For), now, w.Step())
		if err != nil {
			res = trigger.Unknown(fmt.Errorf("query failed: %w", err))
		} else {
			res = trigger.Judge(series, threshold(g.Below, g.Above), w, now)
		}
		if !errors.Is(err, promq.ErrNotConfigured) {
			p.wakeAt(next)
		}
	}
	p.evaluated = append(p.evaluated, name)
	recordGuard(line, res)
	prev := line.Status.Guard
	if prev != nil && prev.Name != live.Name {
		prev = nil // a new live version: a new watch
	}
	st := nextTriggerStatus(prev, live.Name, res, p.now)
	if prev == nil || prev.State != st.State {
		if !(prev == nil && st.State == v1alpha1.TriggerInactive) {
			p.eventFor("Guard/"+live.Name, line, live, triggerEventType(st.State), "Guard"+string(st.State), "guard on %s is %s: %s", live.Name, st.State, st.Message)
		}
	}
	line.Status.Guard = &st
	return &res
}

// guardVerdict is what a guard result calls for.
type guardVerdict struct {
	degraded metav1.ConditionStatus
	reason   string
	message  string
	// target, when set, is the version to switch to, as kind.
	target *v1alpha1.ModelVersion
	kind   v1alpha1.PromotionKind
	// review asks a person to look.
	review bool
}

// lastAutomaticRollback is when the guard last switched the line, read from
// the versions it switched to (so a restart cannot forget it).
func lastAutomaticRollback(vw *view) *time.Time {
	var last *time.Time
	for _, v := range vw.versions {
		k := promotionKind(v)
		if (k != v1alpha1.PromotionRollback && k != v1alpha1.PromotionFallback) || v.Status.Promotion.StartedTime == nil {
			continue
		}
		if t := v.Status.Promotion.StartedTime.Time; last == nil || t.After(*last) {
			last = &t
		}
	}
	return last
}

// fallbackTarget is where the guard switches to: the first of the line's
// fallbacks (policy.Fallbacks), or nil with what was ruled out.
func fallbackTarget(line *v1alpha1.ModelLine, vw *view, live *v1alpha1.ModelVersion) (*v1alpha1.ModelVersion, v1alpha1.PromotionKind, string) {
	fbs, why := policy.Fallbacks(line.Spec.Fallback, live, vw.version)
	if len(fbs) == 0 {
		return nil, "", why
	}
	return fbs[0].Version, fbs[0].Kind, ""
}

// decideGuard turns a guard result into a verdict: a sustained regression
// within probation switches to a fallback (at most one automatic switch per
// probation window), after probation it only degrades, Unknown never acts.
func decideGuard(line *v1alpha1.ModelLine, vw *view, res trigger.Result, now time.Time) guardVerdict {
	live := vw.live()
	g := line.Spec.Guard
	switch res.State {
	case v1alpha1.TriggerUnknown:
		return guardVerdict{degraded: metav1.ConditionUnknown, reason: reasonGuardUnknown, message: "the guard cannot judge " + live.Name + ": " + res.Message + "; nothing is done until it can"}
	case v1alpha1.TriggerInactive, v1alpha1.TriggerPending:
		reason := reasonGuardHealthy
		if math.IsNaN(res.Value) {
			reason = reasonGuardWatching
		}
		return guardVerdict{degraded: metav1.ConditionFalse, reason: reason, message: res.Message}
	}
	probationEnd := live.Status.PromotedTime.Add(seconds(g.ProbationSeconds))
	regressed := fmt.Sprintf("%s regressed in production: %s", live.Name, res.Message)
	if !now.Before(probationEnd) {
		return guardVerdict{degraded: metav1.ConditionTrue, reason: reasonRegressedLate,
			message: fmt.Sprintf("%s; its probation ended at %s, so nothing is rolled back automatically", regressed, probationEnd.UTC().Format(time.RFC3339))}
	}
	if v := vw.promoting(); v != nil {
		return guardVerdict{degraded: metav1.ConditionTrue, reason: reasonRollbackWaits,
			message: fmt.Sprintf("%s; a rollback waits for the rollout of %s to end", regressed, v.Name)}
	}
	if last := lastAutomaticRollback(vw); last != nil && now.Before(last.Add(seconds(g.ProbationSeconds))) {
		return guardVerdict{degraded: metav1.ConditionTrue, reason: reasonRollbackLimit, review: true,
			message: fmt.Sprintf("%s; the line already switched automatically at %s, and switches at most once per probation window (%ds): a person should decide", regressed, last.UTC().Format(time.RFC3339), g.ProbationSeconds)}
	}
	target, kind, why := fallbackTarget(line, vw, live)
	if target == nil {
		return guardVerdict{degraded: metav1.ConditionTrue, reason: reasonNoFallback, review: true,
			message: fmt.Sprintf("%s; there is nothing to fall back to (%s)", regressed, why)}
	}
	reason := reasonRegressed
	if kind == v1alpha1.PromotionFallback {
		reason = reasonSwitchingFallback
	}
	return guardVerdict{degraded: metav1.ConditionTrue, reason: reason, target: target, kind: kind,
		message: fmt.Sprintf("%s; switching to %s", regressed, target.Name)}
}

// guard acts on the guard's result: conditions, and a switch when called for.
func (r *ModelLineReconciler) guard(line *v1alpha1.ModelLine, vw *view, p *pass, res *trigger.Result) {
	if line.Spec.Guard == nil {
		return
	}
	if res == nil {
		return // not judged in this pass: the conditions stand
	}
	v := decideGuard(line, vw, *res, p.now.Time)
	changed := setConditionSticky(&line.Status.Conditions, metav1.Condition{Type: v1alpha1.ConditionDegraded, Status: v.degraded, Reason: v.reason, Message: text.Truncate(v.message, 2000)}, line.Generation, p.now)
	if changed && v.degraded == metav1.ConditionTrue && v.target == nil {
		p.eventFor("Guard/"+v.reason, line, vw.live(), corev1.EventTypeWarning, "Degraded", "%s", v.message)
	}
	if v.review {
		if setConditionSticky(&line.Status.Conditions, metav1.Condition{Type: v1alpha1.ConditionNeedsReview, Status: metav1.ConditionTrue, Reason: v.reason, Message: text.Truncate(v.message, 2000)}, line.Generation, p.now) {
			p.eventFor("Guard/"+v.reason, line, vw.live(), corev1.EventTypeWarning, "NeedsReview", "%s", v.message)
		}
	} else if c := conditionReason(line, v1alpha1.ConditionNeedsReview); (c == reasonRollbackLimit || c == reasonNoFallback) && v.degraded == metav1.ConditionFalse {
		setCondition(&line.Status.Conditions, metav1.Condition{Type: v1alpha1.ConditionNeedsReview, Status: metav1.ConditionFalse, Reason: "Recovered", Message: "the guard finds the live version healthy again"}, line.Generation, p.now)
	}
	if v.target == nil {
		return
	}
	target := "previous"
	if v.kind == v1alpha1.PromotionFallback {
		target = "rule-based"
	}
	startPromotionAs(line, vw, v.target, p, v.kind, v.reason, v.message)
	p.eventFor("Guard/rollback", line, v.target, corev1.EventTypeWarning, "RollingBack", "%s", v.message)
	p.countFor(v.target.Name, func() { rollbacks.WithLabelValues(line.Namespace, line.Name, target).Inc() })
}

// handleRollbackRequest serves a version a person named in the
// plumbline.dev/rollback-to annotation again: an archived version of the
// line (even one the guard rolled back) or its rule-based version. It goes
// through the same promotion path, with its revert on a failed rollout.
func (r *ModelLineReconciler) handleRollbackRequest(line *v1alpha1.ModelLine, vw *view, p *pass) {
	name, ok := line.Annotations[v1alpha1.RollbackRequestAnnotation]
	if !ok || name == line.Status.LastRollbackRequest {
		return
	}
	if v := vw.promoting(); v != nil {
		return // waits for that rollout; the Deployment's changes wake the line
	}
	target := vw.version(name)
	why := ""
	switch {
	case target == nil:
		why = fmt.Sprintf("the line has no version %q", name)
	case target == vw.live():
		why = fmt.Sprintf("%s already serves", name)
	case target.Status.Phase != v1alpha1.PhaseArchived && target.Status.Phase != v1alpha1.PhaseStandby:
		why = fmt.Sprintf("%s is %s; only an archived version (one that served before) or the rule-based version can be rolled back to", name, target.Status.Phase)
	}
	line.Status.LastRollbackRequest = text.Truncate(name, 253)
	if why != "" {
		p.eventFor("Rollback/"+text.Truncate(name, 100), line, nil, corev1.EventTypeWarning, "RollbackRequestInvalid", "rollback to %q refused: %s", name, why)
		return
	}
	msg := fmt.Sprintf("a person asked to serve %s again (annotation %s)", name, v1alpha1.RollbackRequestAnnotation)
	startPromotionAs(line, vw, target, p, v1alpha1.PromotionRequested, "RequestedByPerson", msg)
	p.eventFor("Rollback/"+target.Name, line, target, corev1.EventTypeNormal, "RollbackRequested", "%s", msg)
	p.countFor(target.Name, func() { rollbacks.WithLabelValues(line.Namespace, line.Name, "requested").Inc() })
}

func conditionReason(line *v1alpha1.ModelLine, typ string) string {
	for _, c := range line.Status.Conditions {
		if c.Type == typ {
			return c.Reason
		}
	}
	return ""
}
