package modelline

import (
	"context"
	"fmt"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// phase is one step of a pass over a line. It reads what the pass has seen
// and what the phases before it found (the pass), and adds to it. No phase
// writes a status: the reconciler writes each changed status once, after the
// last phase. A phase that acts may change the cluster: create a version or
// a Job, patch the serving Deployment, delete what history no longer keeps.
type phase struct {
	name string
	// acts says the phase moves the line on: a version's phase, a retrain
	// started, the cluster changed. A suspended line runs only the phases
	// that do not: it reports, it does not act.
	acts bool
	run  func(r *Reconciler, ctx context.Context, p *pass) error
}

// phases is a pass over a line that is ready (its spec valid, its serving
// Deployment there), in order:
//
//   - what the line's signals say: the triggers, the guard on the live
//     version, and the inputs for an early warning;
//   - production first: the versions' phases made to agree with the one
//     that serves, a failed rollout undone, a regression answered (the
//     guard's switch, an evaluation of alternatives followed, a person's
//     rollback), before anything new starts;
//   - then what asks for a retrain, a person's request before the schedule
//     before the triggers before the early warning, each later one seeing a
//     version an earlier one started as in flight;
//   - then the active version taken one step (training, gate, approval,
//     rollout), and what its outcome calls for;
//   - last, the queue marked and history pruned.
var phases = []phase{
	{"judge the triggers", reports, (*Reconciler).evaluateTriggers},
	{"judge the guard", reports, (*Reconciler).evaluateGuard},
	{"watch the inputs", reports, (*Reconciler).watchInputs},
	{"settle the versions", acts, settleVersions},
	{"undo failed rollouts", acts, (*Reconciler).revertFailedRollouts},
	{"answer the guard", acts, (*Reconciler).guard},
	{"follow the alternatives", acts, (*Reconciler).watchAlternatives},
	{"a person's rollback", acts, (*Reconciler).handleRollbackRequest},
	{"a person's retrain request", acts, (*Reconciler).handleRetrainRequest},
	{"the schedule", acts, (*Reconciler).handleSchedule},
	{"the triggers", acts, (*Reconciler).handleTriggers},
	{"the early warning", acts, (*Reconciler).handleEarlyWarning},
	{"step the active version", acts, (*Reconciler).stepActive},
	{"alternatives when a retrain did not help", acts, (*Reconciler).alternativesAfterRejection},
	{"mark the queue", acts, markQueue},
	{"prune history", acts, (*Reconciler).prune},
}

// Whether a phase acts, for the table above.
const (
	reports = false
	acts    = true
)

// settleVersions makes the versions' phases agree with the one that serves.
func settleVersions(_ *Reconciler, _ context.Context, p *pass) error {
	settle(p.line, p.vw, p)
	return nil
}

// stepActive takes the active version one step: training, gate, approval,
// rollout. A rollout this pass decided waits for the next, which patches
// the Deployment once the decision is written.
func (r *Reconciler) stepActive(ctx context.Context, p *pass) error {
	v := p.vw.active()
	if v == nil || p.rolloutDecided[v.Name] {
		return nil
	}
	if err := r.step(ctx, p.line, p.vw, v, p); err != nil {
		return err
	}
	settle(p.line, p.vw, p)
	p.stepped = v
	return nil
}

// alternativesAfterRejection evaluates the alternatives when the live
// version is degraded and the candidate retrained for it failed its gate:
// retraining did not help, so try what the line had before.
func (r *Reconciler) alternativesAfterRejection(ctx context.Context, p *pass) error {
	v := p.stepped
	if v == nil || v.Status.Phase != v1alpha1.PhaseRejected || v.Status.Gate == nil || v.Status.Gate.Verdict != v1alpha1.GateFailed ||
		!isTrue(p.condition(v1alpha1.ConditionDegraded)) {
		return nil
	}
	_, err := r.startAlternatives(ctx, p.line, p.vw, p, altCandidateRejected)
	return err
}

// markQueue marks the versions that wait behind the active one.
func markQueue(_ *Reconciler, _ context.Context, p *pass) error {
	queue(p.vw, p)
	return nil
}

// runPhases runs the pass's phases in order, up to the first that fails.
func (r *Reconciler) runPhases(ctx context.Context, p *pass) error {
	for _, ph := range phases {
		if ph.acts && p.line.Spec.Suspend {
			continue
		}
		if err := ph.run(r, ctx, p); err != nil {
			return fmt.Errorf("%s: %w", ph.name, err)
		}
	}
	return nil
}
