package modelline

import (
	"context"
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"

	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/policy"
	"plumbline.dev/plumbline/internal/engine/text"
	"plumbline.dev/plumbline/internal/engine/trigger"
)

// Why alternatives are evaluated, and how it ended.
const (
	altInsufficientData  = "InsufficientData"
	altCandidateRejected = "CandidateRejected"
	altSwitched          = "Switched"
	altNoneQualified     = "NoneQualified"
	altSuperseded        = "Superseded"
	altNeedsPerson       = "LeftToPerson"
	// reasonAlternativeNeedsPerson is NeedsReview's reason when the best
	// alternative waits for a person's switch.
	reasonAlternativeNeedsPerson = "AlternativeNeedsPerson"
	roleAlternative              = "alternative"
)

// alternatives are the versions the line could serve instead of the live
// one without training: the line's fallbacks (policy.Fallbacks).
func alternatives(line *v1alpha1.ModelLine, vw *view) []*v1alpha1.ModelVersion {
	fbs, _ := policy.Fallbacks(line.Spec.Fallback, vw.live(), vw.version)
	out := make([]*v1alpha1.ModelVersion, 0, len(fbs))
	for _, f := range fbs {
		out = append(out, f.Version)
	}
	return out
}

// alternativeJobName names the evaluation Job of an alternative in the
// line's n-th evaluation of alternatives.
func alternativeJobName(version string, n int32) string {
	return jobName(version, fmt.Sprintf("alt%d", n))
}

// startAlternatives evaluates the alternatives against the degraded live
// version with the line's gate Job and criteria. It reports whether an
// evaluation is under way (started now or before); false means none can
// help: there is nothing to try, or they were tried against this live
// version already.
func (r *Reconciler) startAlternatives(ctx context.Context, line *v1alpha1.ModelLine, vw *view, p *pass, reason string) (bool, error) {
	live := vw.live()
	if live == nil {
		return false, nil
	}
	if a := line.Status.Alternatives; a != nil && a.Against == live.Name {
		return a.Outcome == "", nil
	}
	alts := alternatives(line, vw)
	if len(alts) == 0 {
		return false, nil
	}
	n := int32(1)
	if a := line.Status.Alternatives; a != nil {
		n = a.Number + 1
	}
	st := &v1alpha1.AlternativesStatus{Number: n, Reason: reason, Against: live.Name, StartedTime: p.now.DeepCopy()}
	var names []string
	for _, alt := range alts {
		job := buildGateJob(line, alt, live, dataWindow{to: p.now.Time})
		job.Name = alternativeJobName(alt.Name, n)
		job.Labels[v1alpha1.RoleLabel] = roleAlternative
		job.Spec.Template.Labels[v1alpha1.RoleLabel] = roleAlternative
		got, _, err := r.ensureJob(ctx, job, alt)
		if err != nil {
			return false, fmt.Errorf("evaluate alternative %s: %w", alt.Name, err)
		}
		st.Candidates = append(st.Candidates, v1alpha1.AlternativeResult{Version: alt.Name, Job: got.Name})
		names = append(names, alt.Name)
	}
	line.Status.Alternatives = st
	p.eventFor(fmt.Sprintf("Alternatives/%d", n), line, live, corev1.EventTypeNormal, "EvaluatingAlternatives",
		"%s: evaluating %s against %s on the golden set", reason, strings.Join(names, " and "), live.Name)
	return true, nil
}

// watchAlternatives follows an evaluation of alternatives to its end and
// switches to the best one that passed, or asks a person to review.
func (r *Reconciler) watchAlternatives(ctx context.Context, p *pass) error {
	line, vw := p.line, p.vw
	a := line.Status.Alternatives
	if a != nil && a.Outcome == altNeedsPerson {
		// The question was which version should serve instead of
		// a.Against; once another serves, it is answered.
		if live := vw.live(); live == nil || live.Name != a.Against {
			p.judge(judgement{cond: v1alpha1.ConditionNeedsReview, status: metav1.ConditionFalse, reason: "Answered",
				message: fmt.Sprintf("%s no longer serves", a.Against), onlyWhile: []string{reasonAlternativeNeedsPerson}})
		}
		return nil
	}
	if a == nil || a.Outcome != "" {
		return nil
	}
	if live := vw.live(); live == nil || live.Name != a.Against {
		a.Outcome = altSuperseded
		return nil
	}
	pending := false
	for i := range a.Candidates {
		c := &a.Candidates[i]
		if c.Verdict != "" {
			continue
		}
		job, err := r.jobNamed(ctx, vw, line.Namespace, c.Job)
		if err != nil {
			return err
		}
		if job == nil {
			c.Verdict, c.Message = v1alpha1.GateFailed, fmt.Sprintf("evaluation Job %s was deleted before it finished", c.Job)
			continue
		}
		res, done, err := r.judgeGateJob(ctx, line, job, p)
		if err != nil {
			return err
		}
		if !done {
			pending = true
			continue
		}
		c.Verdict, c.Message = res.Verdict, text.Truncate(res.Reason+": "+res.Message, 2000)
		if len(res.Criteria) > 0 {
			c.Score = res.Criteria[0].Candidate
		}
	}
	if pending {
		return nil
	}
	best := bestAlternative(line, a.Candidates)
	if best == nil {
		a.Outcome = altNoneQualified
		var why []string
		for _, c := range a.Candidates {
			why = append(why, fmt.Sprintf("%s: %s", c.Version, c.Message))
		}
		msg := fmt.Sprintf("%s, and no alternative beats %s on the golden set (%s): a person should decide", altReasonText(a.Reason), a.Against, strings.Join(why, "; "))
		p.judge(judgement{cond: v1alpha1.ConditionNeedsReview, status: metav1.ConditionTrue, reason: "NoAlternativeQualified", message: msg, sticky: true,
			event: lineEvent(line, nil, fmt.Sprintf("Alternatives/%d", a.Number), corev1.EventTypeWarning, "NeedsReview", msg)})
		return nil
	}
	target := vw.version(best.Version)
	if target == nil {
		a.Outcome = altNoneQualified
		return nil
	}
	if !line.Spec.Gate.Allows(v1alpha1.SwitchAlternatives) {
		a.Outcome = altNeedsPerson
		msg := fmt.Sprintf("%s; %s passed the gate against %s (score %s), and %s", altReasonText(a.Reason), target.Name, a.Against, orNone(best.Score),
			askPerson(line, []string{target.Name}))
		p.judge(judgement{cond: v1alpha1.ConditionNeedsReview, status: metav1.ConditionTrue, reason: reasonAlternativeNeedsPerson, message: msg, sticky: true,
			event: lineEvent(line, target, fmt.Sprintf("Alternatives/%d", a.Number), corev1.EventTypeWarning, "NeedsReview", msg)})
		return nil
	}
	a.Outcome, a.Chosen = altSwitched, target.Name
	msg := fmt.Sprintf("%s; %s passed the gate against %s (score %s): switching to it", altReasonText(a.Reason), target.Name, a.Against, orNone(best.Score))
	startPromotionAs(line, vw, target, p, v1alpha1.PromotionAlternative, "AlternativeChosen", msg)
	p.eventFor(fmt.Sprintf("Alternatives/%d", a.Number), line, target, corev1.EventTypeWarning, "AlternativeChosen", "%s", msg)
	target2 := "previous"
	if target.Spec.Source == v1alpha1.SourceRuleBased {
		target2 = "rule-based"
	}
	p.countFor(target.Name, func() { rollbacks.WithLabelValues(line.Namespace, line.Name, target2).Inc() })
	return nil
}

func altReasonText(reason string) string {
	if reason == altInsufficientData {
		return "too little fresh data to retrain"
	}
	return "the retrained candidate failed its gate while the live version is degraded"
}

// bestAlternative is the passing alternative with the best score on the
// first criterion's metric (higher or lower, as is better for it), the first listed on a tie.
func bestAlternative(line *v1alpha1.ModelLine, cs []v1alpha1.AlternativeResult) *v1alpha1.AlternativeResult {
	dir := v1alpha1.HigherBetter
	if len(line.Spec.Gate.Criteria) > 0 {
		dir = line.Spec.Gate.Criteria[0].EffectiveBetter()
	}
	score := func(c v1alpha1.AlternativeResult) float64 {
		v, err := strconv.ParseFloat(c.Score, 64)
		if err != nil || math.IsNaN(v) {
			return math.Inf(-1)
		}
		if dir == v1alpha1.LowerBetter {
			return -v
		}
		return v
	}
	var best *v1alpha1.AlternativeResult
	for i := range cs {
		if cs[i].Verdict != v1alpha1.GatePassed {
			continue
		}
		if best == nil || score(cs[i]) > score(*best) {
			best = &cs[i]
		}
	}
	return best
}

// Degraded condition reasons.
const (
	reasonGuardHealthy  = "Healthy"
	reasonGuardWatching = "Watching"
	// reasonGuardAwaitingLabels: the guard waits for the predictions of the
	// version it guards to have their labels before it judges anything.
	reasonGuardAwaitingLabels = "AwaitingOwnLabels"
	reasonGuardUnknown        = "GuardUnknown"
	reasonRegressed           = "Regressed"
	reasonRegressedLate       = "RegressedAfterProbation"
	reasonRollbackLimit       = "RollbackLimit"
	reasonNoFallback          = "NoFallback"
	reasonRollbackWaits       = "RollbackWaits"
	reasonSwitchingFallback   = "SwitchingToFallback"
	reasonSwitchNeedsPerson   = "SwitchNeedsPerson"
)

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
// fallbacks (policy.Fallbacks) that spec.gate lets it switch to without a
// person. With none, it returns nil and why: what was ruled out, or the
// fallbacks a person must choose between (held, non-empty).
func fallbackTarget(line *v1alpha1.ModelLine, vw *view, live *v1alpha1.ModelVersion) (target *v1alpha1.ModelVersion, kind v1alpha1.PromotionKind, why string, held []string) {
	fbs, why := policy.Fallbacks(line.Spec.Fallback, live, vw.version)
	if len(fbs) == 0 {
		return nil, "", why, nil
	}
	for _, f := range fbs {
		if line.Spec.Gate.Allows(switchOf(f.Kind)) {
			return f.Version, f.Kind, "", nil
		}
		held = append(held, f.Version.Name)
	}
	return nil, "", "", held
}

// switchOf is the automatic switch a guard's switch of kind is.
func switchOf(kind v1alpha1.PromotionKind) v1alpha1.UnattendedSwitch {
	if kind == v1alpha1.PromotionFallback {
		return v1alpha1.SwitchRuleBasedFallback
	}
	return v1alpha1.SwitchRollback
}

// askPerson is the advice of a switch the line leaves to a person: which
// versions could serve, and the command that switches to one.
func askPerson(line *v1alpha1.ModelLine, versions []string) string {
	return fmt.Sprintf("%s could serve instead, but spec.gate.withoutApproval leaves this switch to a person (approval %s): kubectl plumbline rollback %s --to %s -n %s",
		strings.Join(versions, " or "), line.Spec.Gate.Approval, line.Name, versions[0], line.Namespace)
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
	probationEnd := line.Spec.ProbationEnd(live.Status.PromotedTime.Time)
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
	target, kind, why, held := fallbackTarget(line, vw, live)
	if len(held) > 0 {
		return guardVerdict{degraded: metav1.ConditionTrue, reason: reasonSwitchNeedsPerson, review: true,
			message: fmt.Sprintf("%s; %s", regressed, askPerson(line, held))}
	}
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

// guardJudgements is what the guard's verdict says of the line's Degraded
// and NeedsReview conditions.
func guardJudgements(line *v1alpha1.ModelLine, live *v1alpha1.ModelVersion, v guardVerdict) []judgement {
	degraded := judgement{cond: v1alpha1.ConditionDegraded, status: v.degraded, reason: v.reason, message: v.message, sticky: true}
	if v.degraded == metav1.ConditionTrue && v.target == nil {
		// A switch has events of its own.
		degraded.event = lineEvent(line, live, "Guard/"+v.reason, corev1.EventTypeWarning, "Degraded", v.message)
	}
	js := []judgement{degraded}
	switch {
	case v.review:
		js = append(js, judgement{cond: v1alpha1.ConditionNeedsReview, status: metav1.ConditionTrue, reason: v.reason, message: v.message, sticky: true,
			event: lineEvent(line, live, "Guard/"+v.reason, corev1.EventTypeWarning, "NeedsReview", v.message)})
	case v.degraded == metav1.ConditionFalse:
		js = append(js, judgement{cond: v1alpha1.ConditionNeedsReview, status: metav1.ConditionFalse, reason: "Recovered",
			message: "the guard finds the live version healthy again", onlyWhile: []string{reasonRollbackLimit, reasonNoFallback, reasonSwitchNeedsPerson}})
	}
	return js
}

// guard acts on the guard's result: it judges the conditions, and starts
// a switch when called for.
func (r *Reconciler) guard(_ context.Context, p *pass) error {
	line, vw, res := p.line, p.vw, p.guarded
	if line.Spec.Guard == nil {
		return nil
	}
	if res == nil {
		return nil // not judged in this pass: the conditions stand
	}
	v := decideGuard(line, vw, *res, p.now.Time)
	if p.guardReason != "" && v.reason == reasonGuardWatching {
		v.reason = p.guardReason
	}
	p.judge(guardJudgements(line, vw.live(), v)...)
	if v.target == nil {
		return nil
	}
	target := "previous"
	if v.kind == v1alpha1.PromotionFallback {
		target = "rule-based"
	}
	startPromotionAs(line, vw, v.target, p, v.kind, v.reason, v.message)
	p.eventFor("Guard/rollback", line, v.target, corev1.EventTypeWarning, "RollingBack", "%s", v.message)
	p.countFor(v.target.Name, func() { rollbacks.WithLabelValues(line.Namespace, line.Name, target).Inc() })
	return nil
}

// handleRollbackRequest serves a version a person named in the
// plumbline.dev/rollback-to annotation again: an archived version of the
// line (even one the guard rolled back) or its rule-based version. It goes
// through the same promotion path, with its revert on a failed rollout.
// Each distinct value acts once.
func (r *Reconciler) handleRollbackRequest(ctx context.Context, p *pass) error {
	line, vw := p.line, p.vw
	value, ok := line.Annotations[v1alpha1.RollbackRequestAnnotation]
	if !ok || value == line.Status.LastRollbackRequest {
		return nil
	}
	// VERSION, or VERSION/TOKEN: a token makes a second request for the
	// same version a new value.
	name, _, _ := strings.Cut(value, "/")
	if v := vw.promoting(); v != nil {
		return nil // waits for that rollout; the Deployment's changes wake the line
	}
	target := vw.version(name)
	if target == nil {
		// A history version is read in full only now.
		var err error
		if target, err = r.recall(ctx, p, name); err != nil {
			return err
		}
	}
	why := ""
	switch {
	case target == nil:
		why = fmt.Sprintf("the line has no version %q", name)
	case target == vw.live():
		why = fmt.Sprintf("%s already serves", name)
	case target.Status.Phase != v1alpha1.PhaseArchived && target.Status.Phase != v1alpha1.PhaseStandby:
		why = fmt.Sprintf("%s is %s; only an archived version (one that served before) or the rule-based version can be rolled back to", name, target.Status.Phase)
	}
	line.Status.LastRollbackRequest = text.Truncate(value, 253)
	if why != "" {
		p.eventFor("Rollback/"+text.Truncate(name, 100), line, nil, corev1.EventTypeWarning, "RollbackRequestInvalid", "rollback to %q refused: %s", name, why)
		return nil
	}
	msg := fmt.Sprintf("a person asked to serve %s again (annotation %s)", name, v1alpha1.RollbackRequestAnnotation)
	startPromotionAs(line, vw, target, p, v1alpha1.PromotionRequested, "RequestedByPerson", msg)
	p.eventFor("Rollback/"+target.Name, line, target, corev1.EventTypeNormal, "RollbackRequested", "%s", msg)
	p.countFor(target.Name, func() { rollbacks.WithLabelValues(line.Namespace, line.Name, "requested").Inc() })
	return nil
}
