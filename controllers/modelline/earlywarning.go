package modelline

import (
	"context"
	"strings"
	"time"

	corev1 "k8s.io/api/core/v1"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/types"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/policy"
)

// defaultEarlyWarningEvery is spec.checks.earlyWarning.everySeconds' default.
const defaultEarlyWarningEvery = 5 * time.Minute

// earlyWarningKey is the early warning's entry in the evaluation memory;
// trigger names cannot hold a colon.
const earlyWarningKey = "inputs:"

// watchInputs runs the drift checks on their own interval when the line
// asks for an early warning (spec.checks.earlyWarning), and judges the
// InputsDrifted condition from them (policy.JudgeInputs). It reports only:
// drifting inputs start nothing by themselves.
func (r *Reconciler) watchInputs(ctx context.Context, p *pass) error {
	line := p.line
	c := line.Spec.Checks
	if c == nil || c.EarlyWarning == nil || len(c.Drift) == 0 {
		meta.RemoveStatusCondition(&line.Status.Conditions, v1alpha1.ConditionInputsDrifted)
		return nil
	}
	every := seconds(c.EarlyWarning.EverySeconds)
	if every <= 0 {
		every = defaultEarlyWarningEvery
	}
	key := types.NamespacedName{Namespace: line.Namespace, Name: line.Name}
	now := p.now.Time
	due, next := r.evals.due(key, line.Generation, earlyWarningKey, every, now, !r.Unspread)
	p.wakeAt(next)
	if !due {
		return nil
	}
	var drift []check
	for _, q := range c.Drift {
		drift = append(drift, r.runCheck(ctx, line, "drift", q.Name, q.Query, threshold(q.Below, q.Above), now))
	}
	w := policy.JudgeInputs(drift, line.Spec.LabelDelay(nil), now)
	j := judgement{cond: v1alpha1.ConditionInputsDrifted, reason: w.Reason, message: w.Message, sticky: true}
	prev := p.condition(v1alpha1.ConditionInputsDrifted)
	switch {
	case w.Drifted:
		j.status = metav1.ConditionTrue
		j.event = lineEvent(line, nil, "EarlyWarning", corev1.EventTypeWarning, "InputsDrifted", w.Message)
		// The message holds while the same checks drift; another check
		// drifting (or one settling) is news.
		if isTrue(prev) && !strings.HasPrefix(prev.Message, w.Headline()+":") {
			j.sticky = false
		}
	case w.Known:
		j.status = metav1.ConditionFalse
		if isTrue(prev) {
			j.event = lineEvent(line, nil, "EarlyWarning", corev1.EventTypeNormal, "InputsSteady", w.Message)
		}
	default:
		j.status = metav1.ConditionUnknown
	}
	p.judge(j)
	return nil
}
