package modelline

import (
	"context"
	"errors"
	"fmt"
	"time"

	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/contract/gatereport"
	"plumbline.dev/plumbline/internal/engine/gate"
	"plumbline.dev/plumbline/internal/engine/speccheck"
	"plumbline.dev/plumbline/internal/engine/text"
)

// Version status reasons the lifecycle sets.
const (
	reasonQueued           = "Queued"
	reasonTrainingStarted  = "TrainingStarted"
	reasonTrainingLost     = "TrainingJobLost"
	reasonJobNameTaken     = "JobNameTaken"
	reasonEvaluationLost   = "EvaluationJobLost"
	reasonEvaluationFailed = "EvaluationFailed"
	reasonInitial          = "InitialVersion"
	reasonApprovedAuto     = "ApprovedAutomatically"
	reasonApprovedByPerson = "ApprovedByPerson"
	reasonRejectedByPerson = "RejectedByPerson"
	reasonWaitingDecision  = "WaitingForDecision"
	reasonRollingOut       = "RollingOut"
	reasonRolloutFailed    = "RolloutFailed"
	reasonPromoted         = "Promoted"
	reasonReplaced         = "Replaced"
	reasonStandby          = "FallbackInReserve"
)

// queue marks the versions that wait behind the active one.
func queue(vw *view, p *pass) {
	active := vw.active()
	for _, v := range vw.versions {
		if v != active && v.Status.Phase == "" && v.Spec.Source != v1alpha1.SourceRuleBased {
			p.setPhase(v, v1alpha1.PhasePending, reasonQueued, "queued: the line works on one version at a time, oldest first")
		}
	}
}

// step takes the active version one step along its way.
func (r *Reconciler) step(ctx context.Context, line *v1alpha1.ModelLine, vw *view, v *v1alpha1.ModelVersion, p *pass) error {
	// A person may stop a candidate at any time before its rollout.
	if v.Spec.Decision == v1alpha1.DecisionRejected && v.Status.Phase != v1alpha1.PhasePromoting {
		return r.rejectByPerson(ctx, line, vw, v, p)
	}
	switch v.Status.Phase {
	case "", v1alpha1.PhasePending:
		if v.Spec.Source == v1alpha1.SourceImported {
			if vw.live() == nil {
				firstImport(line, vw, v, p)
				return nil
			}
			return r.startEvaluation(ctx, line, vw, v, nil, p)
		}
		return r.startTraining(ctx, line, vw, v, p)
	case v1alpha1.PhaseTraining:
		return r.watchTraining(ctx, line, vw, v, p)
	case v1alpha1.PhaseEvaluating:
		return r.watchEvaluation(ctx, line, vw, v, p)
	case v1alpha1.PhaseAwaitingApproval:
		if v.Spec.Decision == v1alpha1.DecisionApproved {
			v.Status.DecisionTime = &p.now
			p.event(v, line, corev1.EventTypeNormal, reasonApprovedByPerson, "approved: %s", noteOr(v.Spec.DecisionNote, "no note"))
			startPromotion(line, vw, v, p, reasonApprovedByPerson, "approved by a person")
		}
		return nil
	case v1alpha1.PhasePromoting:
		return r.promote(ctx, line, vw, v, p)
	}
	return nil
}

// firstImport takes the first Imported version of a line with nothing live
// to its rollout without a gate, when spec.gate lets it go without a person
// or a person approved it; else it waits for a person's decision.
func firstImport(line *v1alpha1.ModelLine, vw *view, v *v1alpha1.ModelVersion, p *pass) {
	switch {
	case line.Spec.Gate.Allows(v1alpha1.SwitchFirstImport):
		startPromotion(line, vw, v, p, reasonInitial, "the line has no live version: the first imported version goes live without a gate")
	case v.Spec.Decision == v1alpha1.DecisionApproved:
		v.Status.DecisionTime = &p.now
		startPromotion(line, vw, v, p, reasonApprovedByPerson, "the line has no live version: the first imported version goes live without a gate, approved beforehand")
	default:
		msg := fmt.Sprintf("the line has no live version, and under %s approval the first imported version goes live (without a gate) only once a person approves it: kubectl plumbline approve %s -n %s (spec.gate.withoutApproval.firstImport: true lets it go unattended)",
			line.Spec.Gate.Approval, v.Name, v.Namespace)
		p.setPhase(v, v1alpha1.PhaseAwaitingApproval, reasonWaitingDecision, msg)
		p.event(line, v, corev1.EventTypeNormal, "AwaitingApproval", "version %s, the line's first, waits for a person's decision", v.Name)
	}
}

func noteOr(note, fallback string) string {
	if note != "" {
		return note
	}
	return fallback
}

// rejectByPerson ends a candidate a person rejected, stopping its running
// Job.
func (r *Reconciler) rejectByPerson(ctx context.Context, line *v1alpha1.ModelLine, vw *view, v *v1alpha1.ModelVersion, p *pass) error {
	for _, role := range []string{roleTraining, roleGate} {
		if job := vw.jobs[jobName(v.Name, role)]; job != nil && metav1.IsControlledBy(job, v) {
			if outcome, _, _ := jobResult(job); outcome == jobRunning {
				if err := r.Delete(ctx, job, client.PropagationPolicy(metav1.DeletePropagationBackground)); client.IgnoreNotFound(err) != nil {
					return fmt.Errorf("stop Job %s of rejected version %s: %w", job.Name, v.Name, err)
				}
			}
		}
	}
	v.Status.DecisionTime = &p.now
	msg := noteOr(v.Spec.DecisionNote, "rejected by a person")
	p.setPhase(v, v1alpha1.PhaseRejected, reasonRejectedByPerson, msg)
	p.event(v, line, corev1.EventTypeNormal, reasonRejectedByPerson, "rejected: %s", msg)
	finished(line, v, p, "Rejected")
	return nil
}

// finished counts a version that will not go further.
func finished(line *v1alpha1.ModelLine, v *v1alpha1.ModelVersion, p *pass, result string) {
	reason := v.Spec.Cause
	p.countFor(v.Name, func() { retrainsFinished.WithLabelValues(line.Namespace, line.Name, reason, result).Inc() })
}

// startTraining creates the training Job, or adopts the one an earlier pass
// created, and moves the version to Training.
func (r *Reconciler) startTraining(ctx context.Context, line *v1alpha1.ModelLine, vw *view, v *v1alpha1.ModelVersion, p *pass) error {
	if line.Spec.Training == nil {
		p.setPhase(v, v1alpha1.PhaseFailed, "NoTraining", "the line has no spec.training, so a Trained version cannot be trained")
		p.event(v, line, corev1.EventTypeWarning, "NoTraining", "%s", v.Status.Message)
		finished(line, v, p, "Failed")
		return nil
	}
	if v.Spec.ArtifactURI == "" {
		// A Trained version a person created: name its artifact now.
		return r.nameArtifact(ctx, line, vw, v)
	}
	w := dataWindow{from: lastTrainedUntil(vw, v), to: p.now.Time}
	want := buildTrainingJob(line, v, w)
	job, created, err := r.ensureJob(ctx, want, v)
	if errors.Is(err, errJobNameTaken) {
		return r.jobNameTaken(line, v, want.Name, p)
	}
	if err != nil {
		return err
	}
	if !created {
		// Created by a pass that did not live to record it: its window is
		// the one the Job was given.
		if w, err = windowFromJob(job); err != nil {
			return err
		}
	}
	v.Status.TrainingJob = job.Name
	v.Status.DataTo = &metav1.Time{Time: w.to}
	v.Status.DataFrom = nil
	if w.from != nil {
		v.Status.DataFrom = &metav1.Time{Time: *w.from}
	}
	window := "all history"
	if w.from != nil {
		window = "data from " + formatTime(w.from)
	}
	msg := fmt.Sprintf("training Job %s runs on %s to %s", job.Name, window, formatTime(&w.to))
	p.setPhase(v, v1alpha1.PhaseTraining, reasonTrainingStarted, msg)
	if created {
		p.event(v, line, corev1.EventTypeNormal, reasonTrainingStarted, "%s", msg)
		reason := v.Spec.Cause
		p.countFor(v.Name, func() { retrainsStarted.WithLabelValues(line.Namespace, line.Name, reason).Inc() })
	}
	return nil
}

// nameArtifact fills spec.artifactURI of a Trained version a person created,
// numbering it like the controller's own.
func (r *Reconciler) nameArtifact(ctx context.Context, line *v1alpha1.ModelLine, vw *view, v *v1alpha1.ModelVersion) error {
	n := nextNumber(line, vw)
	uri, err := speccheck.RenderArtifactURI(line.Spec.Training.ArtifactURI, speccheck.ArtifactData{Line: line.Name, Version: v.Name, Number: n})
	if err != nil {
		return err
	}
	// An edited deep copy: v's labels are the cache's (workingCopy).
	edited := v.DeepCopy()
	edited.Spec.ArtifactURI = uri
	if edited.Labels == nil {
		edited.Labels = map[string]string{}
	}
	edited.Labels[numberLabel] = fmt.Sprint(n)
	if err := r.Patch(ctx, edited, client.MergeFrom(v)); err != nil {
		return fmt.Errorf("name the artifact of version %s: %w", v.Name, err)
	}
	*v = *edited
	line.Status.VersionCount = max(line.Status.VersionCount, n)
	// The patch wakes the line again, and the next pass trains.
	return nil
}

// lastTrainedUntil is the end of the data window of the newest version that
// trained successfully, other than v: the start of v's window.
func lastTrainedUntil(vw *view, v *v1alpha1.ModelVersion) *time.Time {
	var until *time.Time
	for _, x := range vw.versions {
		if x == v || x.Status.DataTo == nil || !conditionIs(x.Status.Conditions, v1alpha1.ConditionTrained, metav1.ConditionTrue) {
			continue
		}
		if until == nil || x.Status.DataTo.After(*until) {
			t := x.Status.DataTo.Time
			until = &t
		}
	}
	return until
}

func (r *Reconciler) jobNameTaken(line *v1alpha1.ModelLine, v *v1alpha1.ModelVersion, name string, p *pass) error {
	msg := fmt.Sprintf("a Job named %s exists and does not belong to this version; delete or rename it, then create a new version", name)
	p.setPhase(v, v1alpha1.PhaseFailed, reasonJobNameTaken, msg)
	p.event(v, line, corev1.EventTypeWarning, reasonJobNameTaken, "%s", msg)
	finished(line, v, p, "Failed")
	return nil
}

// watchTraining follows the training Job to its end.
func (r *Reconciler) watchTraining(ctx context.Context, line *v1alpha1.ModelLine, vw *view, v *v1alpha1.ModelVersion, p *pass) error {
	job, err := r.jobNamed(ctx, vw, v.Namespace, jobName(v.Name, roleTraining))
	if err != nil {
		return err
	}
	if job == nil || !metav1.IsControlledBy(job, v) {
		msg := fmt.Sprintf("training Job %s was deleted before it finished", jobName(v.Name, roleTraining))
		p.setPhase(v, v1alpha1.PhaseFailed, reasonTrainingLost, msg)
		p.event(v, line, corev1.EventTypeWarning, reasonTrainingLost, "%s", msg)
		p.event(line, v, corev1.EventTypeWarning, "TrainingFailed", "version %s: %s", v.Name, msg)
		finished(line, v, p, "Failed")
		return nil
	}
	switch outcome, reason, message := jobResult(job); outcome {
	case jobFailed:
		msg := fmt.Sprintf("training Job %s failed: %s: %s", job.Name, reason, message)
		p.setPhase(v, v1alpha1.PhaseFailed, reason, msg)
		p.event(v, line, corev1.EventTypeWarning, "TrainingFailed", "%s", msg)
		p.event(line, v, corev1.EventTypeWarning, "TrainingFailed", "version %s: %s", v.Name, msg)
		finished(line, v, p, "Failed")
	case jobSucceeded:
		p.event(v, line, corev1.EventTypeNormal, "TrainingSucceeded", "training Job %s succeeded", job.Name)
		w := dataWindow{to: p.now.Time}
		if v.Status.DataTo != nil {
			w.to = v.Status.DataTo.Time
		}
		if v.Status.DataFrom != nil {
			t := v.Status.DataFrom.Time
			w.from = &t
		}
		return r.startEvaluation(ctx, line, vw, v, &w, p)
	}
	return nil
}

// startEvaluation creates the gate Job against the live version, or adopts
// the one an earlier pass created, and moves the version to Evaluating.
func (r *Reconciler) startEvaluation(ctx context.Context, line *v1alpha1.ModelLine, vw *view, v *v1alpha1.ModelVersion, w *dataWindow, p *pass) error {
	window := dataWindow{to: p.now.Time}
	if w != nil {
		window = *w
	}
	baseline := vw.live()
	want := buildGateJob(line, v, baseline, window)
	job, created, err := r.ensureJob(ctx, want, v)
	if errors.Is(err, errJobNameTaken) {
		return r.jobNameTaken(line, v, want.Name, p)
	}
	if err != nil {
		return err
	}
	against := "no live version"
	if b := job.Annotations[baselineVersionAnnotation]; b != "" {
		against = "live version " + b
	}
	v.Status.GateJob = job.Name
	msg := fmt.Sprintf("evaluation Job %s compares it with %s on the golden set", job.Name, against)
	p.setPhase(v, v1alpha1.PhaseEvaluating, "EvaluationStarted", msg)
	if created {
		p.event(v, line, corev1.EventTypeNormal, "EvaluationStarted", "%s", msg)
	}
	return nil
}

// watchEvaluation follows the gate Job, reads its report and judges it.
func (r *Reconciler) watchEvaluation(ctx context.Context, line *v1alpha1.ModelLine, vw *view, v *v1alpha1.ModelVersion, p *pass) error {
	job, err := r.jobNamed(ctx, vw, v.Namespace, jobName(v.Name, roleGate))
	if err != nil {
		return err
	}
	if job == nil || !metav1.IsControlledBy(job, v) {
		r.rejectReport(line, vw, v, p, reasonEvaluationLost, fmt.Sprintf("evaluation Job %s was deleted before it finished", jobName(v.Name, roleGate)), "")
		return nil
	}
	res, done, err := r.judgeGateJob(ctx, line, job, p)
	if err != nil || !done {
		return err
	}
	r.judged(line, vw, v, p, res)
	return nil
}

// judgeGateJob judges a finished evaluation Job: the report its Pod left,
// against the line's criteria. done is false while the Job runs. A Job that
// failed or left no usable report is a Failed verdict whose reason names the
// problem.
func (r *Reconciler) judgeGateJob(ctx context.Context, line *v1alpha1.ModelLine, job *batchv1.Job, p *pass) (v1alpha1.GateResult, bool, error) {
	baseline := job.Annotations[baselineVersionAnnotation]
	refuse := func(reason, msg string) (v1alpha1.GateResult, bool, error) {
		return v1alpha1.GateResult{Verdict: v1alpha1.GateFailed, Reason: reason, Message: text.Truncate(msg, 4000), BaselineVersion: baseline, EvaluatedTime: &p.now}, true, nil
	}
	out, err := r.readReport(ctx, job, "evaluation")
	if err != nil || !out.done {
		return v1alpha1.GateResult{}, false, err
	}
	if out.failed != "" {
		return refuse(reasonEvaluationFailed, out.failed)
	}
	if !out.found {
		return refuse(gatereport.ReasonMissing, fmt.Sprintf("evaluation Job %s completed but none of its Pods is left with a report (a short ttlSecondsAfterFinished can remove them)", job.Name))
	}
	raw, pod := out.raw, out.pod
	rep, err := gatereport.Parse([]byte(raw))
	var bad *gatereport.Error
	if errors.As(err, &bad) {
		return refuse(bad.Reason, fmt.Sprintf("report of Pod %s: %s", pod, bad.Message))
	}
	if err != nil {
		return v1alpha1.GateResult{}, false, err
	}
	res := gate.Decide(line.Spec.Gate.Criteria, rep, baseline != "")
	res.BaselineVersion = baseline
	res.EvaluatedTime = &p.now
	return res, true, nil
}

// rejectReport rejects a candidate whose evaluation gave nothing to judge.
func (r *Reconciler) rejectReport(line *v1alpha1.ModelLine, vw *view, v *v1alpha1.ModelVersion, p *pass, reason, msg, baseline string) {
	r.judged(line, vw, v, p, v1alpha1.GateResult{Verdict: v1alpha1.GateFailed, Reason: reason, Message: text.Truncate(msg, 4000), BaselineVersion: baseline, EvaluatedTime: &p.now})
}

// judged records a gate result and moves the version on: rejected, waiting
// for a person, or promoting.
func (r *Reconciler) judged(line *v1alpha1.ModelLine, vw *view, v *v1alpha1.ModelVersion, p *pass, res v1alpha1.GateResult) {
	v.Status.Gate = &res
	p.countFor(v.Name, func() {
		gateDecisions.WithLabelValues(line.Namespace, line.Name, string(res.Verdict), res.Reason).Inc()
	})
	if res.Verdict != v1alpha1.GatePassed {
		p.setPhase(v, v1alpha1.PhaseRejected, res.Reason, "gate failed: "+res.Message)
		p.event(v, line, corev1.EventTypeWarning, "GateFailed", "%s: %s", res.Reason, res.Message)
		p.event(line, v, corev1.EventTypeWarning, "GateFailed", "version %s rejected, live version unchanged: %s: %s", v.Name, res.Reason, res.Message)
		finished(line, v, p, "Rejected")
		return
	}
	p.event(v, line, corev1.EventTypeNormal, "GatePassed", "%s", res.Message)
	switch {
	case line.Spec.Gate.Approval == v1alpha1.ApprovalManual && v.Spec.Decision != v1alpha1.DecisionApproved:
		msg := fmt.Sprintf("passed the gate; waiting for a person: kubectl patch modelversion %s -n %s --type=merge -p '{\"spec\":{\"decision\":\"Approved\"}}' (or \"Rejected\")", v.Name, v.Namespace)
		p.setPhase(v, v1alpha1.PhaseAwaitingApproval, reasonWaitingDecision, msg)
		p.event(line, v, corev1.EventTypeNormal, "AwaitingApproval", "version %s passed the gate and waits for a person's decision", v.Name)
	case line.Spec.Gate.Approval == v1alpha1.ApprovalManual:
		v.Status.DecisionTime = &p.now
		startPromotion(line, vw, v, p, reasonApprovedByPerson, "passed the gate, approved beforehand")
	default:
		startPromotion(line, vw, v, p, reasonApprovedAuto, "passed the gate")
	}
}
