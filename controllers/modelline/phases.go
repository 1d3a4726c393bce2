package modelline

import (
	"context"

	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// advance moves the line's versions along: it settles which version is live,
// undoes failed rollouts, turns a person's retrain request into a version,
// takes the active version one step, and prunes history.
func (r *Reconciler) advance(ctx context.Context, line *v1alpha1.ModelLine, vw *view, p *pass) error {
	// Triggers are evaluated on a suspended line too: that is reporting,
	// not acting.
	firing := r.evaluateTriggers(ctx, line, p)
	guarded := r.evaluateGuard(ctx, line, vw, p)
	if line.Spec.Suspend {
		return nil
	}
	settle(line, vw, p)
	if err := r.revertFailedRollouts(ctx, line, vw, p); err != nil {
		return err
	}
	// Production first: a regression is answered before anything new starts.
	r.guard(line, vw, p, guarded)
	if err := r.watchAlternatives(ctx, line, vw, p); err != nil {
		return err
	}
	r.handleRollbackRequest(line, vw, p)
	// A person's request first, then the schedule, then the triggers: each
	// later one sees a version the earlier started as in flight.
	if err := r.handleRetrainRequest(ctx, line, vw, p); err != nil {
		return err
	}
	if err := r.handleSchedule(ctx, line, vw, p); err != nil {
		return err
	}
	if err := r.handleTriggers(ctx, line, vw, p, firing); err != nil {
		return err
	}
	if v := vw.active(); v != nil && !p.rolloutDecided[v.Name] {
		if err := r.step(ctx, line, vw, v, p); err != nil {
			return err
		}
		settle(line, vw, p)
		if v.Status.Phase == v1alpha1.PhaseRejected && v.Status.Gate != nil && v.Status.Gate.Verdict == v1alpha1.GateFailed && conditionIs(line.Status.Conditions, v1alpha1.ConditionDegraded, metav1.ConditionTrue) {
			// The live version is degraded and the retrain did not help:
			// try what the line had before.
			if _, err := r.startAlternatives(ctx, line, vw, p, altCandidateRejected); err != nil {
				return err
			}
		}
	}
	queue(vw, p)
	return r.prune(ctx, line, vw, p)
}
