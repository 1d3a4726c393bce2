package controllers

import (
	"context"
	"fmt"
	"math"
	"strconv"
	"strings"

	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/types"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/policy"
	"plumbline.dev/plumbline/internal/engine/text"
)

// Why alternatives are evaluated, and how it ended.
const (
	altInsufficientData  = "InsufficientData"
	altCandidateRejected = "CandidateRejected"
	altSwitched          = "Switched"
	altNoneQualified     = "NoneQualified"
	altSuperseded        = "Superseded"
	roleAlternative      = "alternative"
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
func (r *ModelLineReconciler) startAlternatives(ctx context.Context, line *v1alpha1.ModelLine, vw *view, p *pass, reason string) (bool, error) {
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
func (r *ModelLineReconciler) watchAlternatives(ctx context.Context, line *v1alpha1.ModelLine, vw *view, p *pass) error {
	a := line.Status.Alternatives
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
		if setConditionSticky(&line.Status.Conditions, metav1.Condition{Type: v1alpha1.ConditionNeedsReview, Status: metav1.ConditionTrue, Reason: "NoAlternativeQualified", Message: text.Truncate(msg, 2000)}, line.Generation, p.now) {
			p.eventFor(fmt.Sprintf("Alternatives/%d", a.Number), line, nil, corev1.EventTypeWarning, "NeedsReview", "%s", msg)
		}
		return nil
	}
	target := vw.version(best.Version)
	if target == nil {
		a.Outcome = altNoneQualified
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
// first criterion's metric (in its direction), the first listed on a tie.
func bestAlternative(line *v1alpha1.ModelLine, cs []v1alpha1.AlternativeResult) *v1alpha1.AlternativeResult {
	dir := v1alpha1.HigherIsBetter
	if len(line.Spec.Gate.Criteria) > 0 {
		dir = line.Spec.Gate.Criteria[0].EffectiveDirection()
	}
	score := func(c v1alpha1.AlternativeResult) float64 {
		v, err := strconv.ParseFloat(c.Score, 64)
		if err != nil || math.IsNaN(v) {
			return math.Inf(-1)
		}
		if dir == v1alpha1.LowerIsBetter {
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

// jobNamed reads a Job of the line by name, from the cache or, when the
// cache does not have it yet, from the API server; nil when it is gone.
func (r *ModelLineReconciler) jobNamed(ctx context.Context, vw *view, namespace, name string) (*batchv1.Job, error) {
	if job := vw.jobs[name]; job != nil {
		return job, nil
	}
	var job batchv1.Job
	err := r.APIReader.Get(ctx, types.NamespacedName{Namespace: namespace, Name: name}, &job)
	if apierrors.IsNotFound(err) {
		return nil, nil
	}
	if err != nil {
		return nil, fmt.Errorf("read Job %s: %w", name, err)
	}
	return &job, nil
}
