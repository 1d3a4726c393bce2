package controllers

import (
	"context"
	"errors"
	"fmt"
	"time"

	appsv1 "k8s.io/api/apps/v1"
	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/runtime"
	"k8s.io/apimachinery/pkg/types"
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

// view is what one pass knows about a line besides the line itself. The
// versions are working copies; the pass changes their status in memory and
// writes each changed one once at the end.
type view struct {
	deployment *appsv1.Deployment
	versions   []*v1alpha1.ModelVersion // this line's, oldest first
	jobs       map[string]*batchv1.Job  // this line's Jobs, by name
}

func (v *view) version(name string) *v1alpha1.ModelVersion {
	for _, x := range v.versions {
		if x.Name == name {
			return x
		}
	}
	return nil
}

// live is the version the line serves: the Live one promoted last.
func (v *view) live() *v1alpha1.ModelVersion {
	var best *v1alpha1.ModelVersion
	for _, x := range v.versions {
		if x.Status.Phase != v1alpha1.PhaseLive {
			continue
		}
		if best == nil || promotedAfter(x, best) {
			best = x
		}
	}
	return best
}

func promotedAfter(a, b *v1alpha1.ModelVersion) bool {
	if sa, sb := promotionSequence(a), promotionSequence(b); sa != sb {
		return sa > sb
	}
	at, bt := a.Status.PromotedTime, b.Status.PromotedTime
	switch {
	case at == nil:
		return false
	case bt == nil:
		return true
	case !at.Equal(bt):
		return bt.Before(at)
	}
	return a.Name > b.Name
}

func promotionSequence(v *v1alpha1.ModelVersion) int64 {
	if v.Status.Promotion == nil {
		return 0
	}
	return v.Status.Promotion.Sequence
}

// nextSequence is one more than the highest promotion sequence of the line.
func (v *view) nextSequence() int64 {
	var n int64
	for _, x := range v.versions {
		n = max(n, promotionSequence(x))
	}
	return n + 1
}

// active is the one version the line works on: the oldest in flight.
// Others wait their turn in Pending.
func (v *view) active() *v1alpha1.ModelVersion {
	for _, x := range v.versions {
		if x.DeletionTimestamp != nil || !x.Status.Phase.InFlight() {
			continue
		}
		// A rule-based version is never trained or judged; it is in flight
		// only while the line switches to it.
		if x.Spec.Source == v1alpha1.SourceRuleBased && x.Status.Phase != v1alpha1.PhasePromoting {
			continue
		}
		return x
	}
	return nil
}

// promoting is the version being rolled out, if any.
func (v *view) promoting() *v1alpha1.ModelVersion {
	for _, x := range v.versions {
		if x.DeletionTimestamp == nil && x.Status.Phase == v1alpha1.PhasePromoting {
			return x
		}
	}
	return nil
}

// pass collects what a reconcile pass did, to report after its writes.
type pass struct {
	now    metav1.Time
	events []event
	// metrics are counts to make once the pass's writes are done; a count
	// bound to a version is made when that version's status was written,
	// the rest when the line's was.
	metrics []count
	// wake is the earliest moment, by the controller's clock, when time
	// alone will change something (a trigger due, a scheduled start).
	wake time.Time
	// evaluated are the triggers evaluated in this pass.
	evaluated []string
	// created are the versions this pass created.
	created map[string]bool
	// rolloutDecided are the versions this pass moved to Promoting: their
	// rollout is patched into the Deployment only by a later pass, once
	// the decision and what it replaces are written.
	rolloutDecided map[string]bool
}

type count struct {
	version string
	inc     func()
}

// count adds a line-level count.
func (p *pass) count(inc func()) { p.metrics = append(p.metrics, count{inc: inc}) }

// countFor adds a count of something that happened to a version.
func (p *pass) countFor(version string, inc func()) {
	p.metrics = append(p.metrics, count{version: version, inc: inc})
}

// wakeAt asks for a pass at t, unless an earlier one is asked for.
func (p *pass) wakeAt(t time.Time) {
	if p.wake.IsZero() || t.Before(p.wake) {
		p.wake = t
	}
}

type event struct {
	regarding, related    runtime.Object
	kind, reason, message string
	// action tells apart events of the same reason about the same object
	// (two triggers changing state at once): events.k8s.io folds events
	// with the same reason, action and objects into one series and keeps
	// the first note.
	action string
}

func (p *pass) event(regarding, related runtime.Object, kind, reason, format string, args ...any) {
	p.events = append(p.events, event{regarding, related, kind, reason, fmt.Sprintf(format, args...), "Reconcile"})
}

// eventFor is event with an action naming what it is about.
func (p *pass) eventFor(action string, regarding, related runtime.Object, kind, reason, format string, args ...any) {
	p.events = append(p.events, event{regarding, related, kind, reason, fmt.Sprintf(format, args...), action})
}

// setPhase moves a version to a phase with a reason and a message.
func (p *pass) setPhase(v *v1alpha1.ModelVersion, phase v1alpha1.VersionPhase, reason, message string) {
	v.Status.Phase, v.Status.Reason, v.Status.Message = phase, reason, text.Truncate(message, 2000)
}

func (p *pass) setCond(v *v1alpha1.ModelVersion, typ string, status metav1.ConditionStatus, reason, message string) {
	setCondition(&v.Status.Conditions, metav1.Condition{Type: typ, Status: status, Reason: reason, Message: text.Truncate(message, 2000)}, v.Generation, p.now)
}

// errJobNameTaken is a Job with the version's Job name that the version does
// not own.
var errJobNameTaken = errors.New("job name taken")

// advance moves the line's versions along: it settles which version is live,
// undoes failed rollouts, turns a person's retrain request into a version,
// takes the active version one step, and prunes history.
func (r *ModelLineReconciler) advance(ctx context.Context, line *v1alpha1.ModelLine, vw *view, p *pass) error {
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

// queue marks the versions that wait behind the active one.
func queue(vw *view, p *pass) {
	active := vw.active()
	for _, v := range vw.versions {
		if v != active && v.Status.Phase == "" && v.Spec.Source != v1alpha1.SourceRuleBased {
			p.setPhase(v, v1alpha1.PhasePending, reasonQueued, "queued: the line works on one version at a time, oldest first")
		}
	}
}

// settle makes the versions' phases agree with the one live version (the
// Live one promoted last): any other Live version is archived. A rule-based
// version not serving waits in Standby.
func settle(line *v1alpha1.ModelLine, vw *view, p *pass) {
	live := vw.live()
	for _, v := range vw.versions {
		switch {
		case v.Status.Phase == v1alpha1.PhaseLive && v != live:
			reason, msg := reasonReplaced, fmt.Sprintf("replaced by %s", live.Name)
			if k := promotionKind(live); (k == v1alpha1.PromotionRollback || k == v1alpha1.PromotionFallback) && live.Status.Promotion.FromVersion == v.Name {
				// The guard took it out: it is never promoted again
				// automatically.
				reason, msg = v1alpha1.ReasonRolledBack, fmt.Sprintf("rolled back to %s after a sustained regression in production", live.Name)
			}
			if v.Spec.Source == v1alpha1.SourceRuleBased {
				// A fallback goes back into reserve.
				p.setPhase(v, v1alpha1.PhaseStandby, reasonStandby, msg+"; back in reserve as the line's fallback")
			} else {
				v.Status.ArchivedTime = &p.now
				p.setPhase(v, v1alpha1.PhaseArchived, reason, msg)
			}
			p.setCond(v, v1alpha1.ConditionLive, metav1.ConditionFalse, reason, msg)
			p.event(v, line, corev1.EventTypeNormal, "Archived", "%s", msg)
		case v.Spec.Source == v1alpha1.SourceRuleBased && (v.Status.Phase == "" || v.Status.Phase == v1alpha1.PhasePending):
			p.setPhase(v, v1alpha1.PhaseStandby, reasonStandby, "rule-based version held in reserve as the line's fallback")
		}
	}
}

// handleRetrainRequest turns a new plumbline.dev/retrain-request token into a
// version. A request while another version is in flight is queued: its
// version waits in Pending, and the line works through versions oldest
// first.
func (r *ModelLineReconciler) handleRetrainRequest(ctx context.Context, line *v1alpha1.ModelLine, vw *view, p *pass) error {
	token, ok := line.Annotations[v1alpha1.RetrainRequestAnnotation]
	if !ok || token == line.Status.LastRetrainRequest {
		return nil
	}
	if len(token) == 0 || len(token) > 253 {
		line.Status.LastRetrainRequest = text.Truncate(token, 253)
		p.eventFor("Request/"+text.Truncate(token, 100), line, nil, corev1.EventTypeWarning, "RetrainRequestInvalid", "annotation %s must hold a token of 1 to 253 characters (a timestamp works); this one has %d", v1alpha1.RetrainRequestAnnotation, len(token))
		return nil
	}
	// A version already made for this token (a pass that crashed before
	// recording it) is the request's version.
	for _, v := range vw.versions {
		if v.Annotations[v1alpha1.RetrainRequestAnnotation] == token {
			line.Status.LastRetrainRequest = token
			return nil
		}
	}
	if line.Spec.Training == nil {
		line.Status.LastRetrainRequest = token
		p.eventFor("Request/"+text.Truncate(token, 100), line, nil, corev1.EventTypeWarning, "RetrainRequestInvalid", "retrain request %q: the line has no spec.training", token)
		return nil
	}
	settled, _, err := r.tryStart(ctx, line, vw, p, pathManual, v1alpha1.ReasonManual, map[string]string{v1alpha1.RetrainRequestAnnotation: token})
	if err != nil || !settled {
		// Not settled: the checks could not be judged; the token waits.
		return err
	}
	line.Status.LastRetrainRequest = token
	return nil
}

// StartVersion is the one way a retrain starts, whatever asked for it (a
// person's request, the schedule, a trigger): it creates the line's next
// Trained version with the reason, which then waits its turn. The name comes
// from the version number, so a pass that crashed after creating it finds
// it again instead of making a second.
func (r *ModelLineReconciler) StartVersion(ctx context.Context, line *v1alpha1.ModelLine, vw *view, p *pass, reason string, marks map[string]string) (*v1alpha1.ModelVersion, error) {
	n := nextNumber(line, vw)
	name := versionName(line.Name, n)
	uri, err := speccheck.RenderArtifactURI(line.Spec.Training.ArtifactURI, speccheck.ArtifactData{Line: line.Name, Version: name, Number: n})
	if err != nil {
		return nil, err
	}
	v := &v1alpha1.ModelVersion{
		ObjectMeta: metav1.ObjectMeta{
			Name:      name,
			Namespace: line.Namespace,
			Labels:    map[string]string{v1alpha1.LineLabel: labelValue(line.Name), numberLabel: fmt.Sprint(n)},
			OwnerReferences: []metav1.OwnerReference{*metav1.NewControllerRef(line,
				v1alpha1.GroupVersion.WithKind("ModelLine"))},
		},
		Spec: v1alpha1.ModelVersionSpec{Line: line.Name, Source: v1alpha1.SourceTrained, ArtifactURI: uri, Reason: reason},
	}
	// The marks (a person's token, a scheduled start) say what the version
	// answers, so a pass that crashed before recording it knows it was done.
	if len(marks) > 0 {
		v.Annotations = merge(marks, nil)
	}
	if err := r.Create(ctx, v); err != nil {
		if !apierrors.IsAlreadyExists(err) {
			return nil, fmt.Errorf("create version %s: %w", name, err)
		}
		if err := r.APIReader.Get(ctx, client.ObjectKeyFromObject(v), v); err != nil {
			return nil, fmt.Errorf("read version %s: %w", name, err)
		}
	} else {
		if p.created == nil {
			p.created = map[string]bool{}
		}
		p.created[v.Name] = true
		p.event(v, line, corev1.EventTypeNormal, "Created", "version %d of %s, reason %s, artifact %s", n, line.Name, reason, uri)
	}
	if v.Spec.Line != line.Name {
		return nil, fmt.Errorf("version name %s is taken by a version of line %q", name, v.Spec.Line)
	}
	line.Status.VersionCount = max(line.Status.VersionCount, n)
	if v.Status.Number == 0 {
		v.Status.Number = n // written with the version's first status
	}
	if vw.version(v.Name) == nil {
		vw.versions = append(vw.versions, v)
	}
	return v, nil
}

// nextNumber is one more than the highest number the line has used.
func nextNumber(line *v1alpha1.ModelLine, vw *view) int32 {
	n := line.Status.VersionCount
	for _, v := range vw.versions {
		var k int32
		if _, err := fmt.Sscan(v.Labels[numberLabel], &k); err == nil && k > n {
			n = k
		}
	}
	return n + 1
}

// step takes the active version one step along its way.
func (r *ModelLineReconciler) step(ctx context.Context, line *v1alpha1.ModelLine, vw *view, v *v1alpha1.ModelVersion, p *pass) error {
	// A person may stop a candidate at any time before its rollout.
	if v.Spec.Decision == v1alpha1.DecisionRejected && v.Status.Phase != v1alpha1.PhasePromoting {
		return r.rejectByPerson(ctx, line, vw, v, p)
	}
	switch v.Status.Phase {
	case "", v1alpha1.PhasePending:
		if v.Spec.Source == v1alpha1.SourceImported {
			if vw.live() == nil {
				startPromotion(line, vw, v, p, reasonInitial, "the line has no live version: the first imported version goes live without a gate")
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
			p.setCond(v, v1alpha1.ConditionApproved, metav1.ConditionTrue, reasonApprovedByPerson, noteOr(v.Spec.DecisionNote, "approved by a person"))
			p.event(v, line, corev1.EventTypeNormal, reasonApprovedByPerson, "approved: %s", noteOr(v.Spec.DecisionNote, "no note"))
			startPromotion(line, vw, v, p, reasonApprovedByPerson, "approved by a person")
		}
		return nil
	case v1alpha1.PhasePromoting:
		return r.promote(ctx, line, vw, v, p)
	}
	return nil
}

func noteOr(note, fallback string) string {
	if note != "" {
		return note
	}
	return fallback
}

// rejectByPerson ends a candidate a person rejected, stopping its running
// Job.
func (r *ModelLineReconciler) rejectByPerson(ctx context.Context, line *v1alpha1.ModelLine, vw *view, v *v1alpha1.ModelVersion, p *pass) error {
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
	p.setCond(v, v1alpha1.ConditionApproved, metav1.ConditionFalse, reasonRejectedByPerson, msg)
	p.setPhase(v, v1alpha1.PhaseRejected, reasonRejectedByPerson, msg)
	p.event(v, line, corev1.EventTypeNormal, reasonRejectedByPerson, "rejected: %s", msg)
	finished(line, v, p, "Rejected")
	return nil
}

// finished counts a version that will not go further.
func finished(line *v1alpha1.ModelLine, v *v1alpha1.ModelVersion, p *pass, result string) {
	reason := v.Spec.Reason
	p.countFor(v.Name, func() { retrainsFinished.WithLabelValues(line.Namespace, line.Name, reason, result).Inc() })
}

// startTraining creates the training Job, or adopts the one an earlier pass
// created, and moves the version to Training.
func (r *ModelLineReconciler) startTraining(ctx context.Context, line *v1alpha1.ModelLine, vw *view, v *v1alpha1.ModelVersion, p *pass) error {
	if line.Spec.Training == nil {
		p.setPhase(v, v1alpha1.PhaseFailed, "NoTraining", "the line has no spec.training, so a Trained version cannot be trained")
		p.setCond(v, v1alpha1.ConditionTrained, metav1.ConditionFalse, "NoTraining", v.Status.Message)
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
	p.setCond(v, v1alpha1.ConditionTrained, metav1.ConditionUnknown, reasonTrainingStarted, msg)
	if created {
		p.event(v, line, corev1.EventTypeNormal, reasonTrainingStarted, "%s", msg)
		reason := v.Spec.Reason
		p.countFor(v.Name, func() { retrainsStarted.WithLabelValues(line.Namespace, line.Name, reason).Inc() })
	}
	return nil
}

// nameArtifact fills spec.artifactURI of a Trained version a person created,
// numbering it like the controller's own.
func (r *ModelLineReconciler) nameArtifact(ctx context.Context, line *v1alpha1.ModelLine, vw *view, v *v1alpha1.ModelVersion) error {
	n := nextNumber(line, vw)
	uri, err := speccheck.RenderArtifactURI(line.Spec.Training.ArtifactURI, speccheck.ArtifactData{Line: line.Name, Version: v.Name, Number: n})
	if err != nil {
		return err
	}
	orig := v.DeepCopy()
	v.Spec.ArtifactURI = uri
	if v.Labels == nil {
		v.Labels = map[string]string{}
	}
	v.Labels[numberLabel] = fmt.Sprint(n)
	if err := r.Patch(ctx, v, client.MergeFrom(orig)); err != nil {
		return fmt.Errorf("name the artifact of version %s: %w", v.Name, err)
	}
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

// ensureJob creates a Job, or finds the one an earlier pass created under
// the same deterministic name. A Job of that name that the version does not
// own is errJobNameTaken.
func (r *ModelLineReconciler) ensureJob(ctx context.Context, want *batchv1.Job, owner *v1alpha1.ModelVersion) (*batchv1.Job, bool, error) {
	err := r.Create(ctx, want)
	if err == nil {
		return want, true, nil
	}
	if !apierrors.IsAlreadyExists(err) {
		return nil, false, fmt.Errorf("create Job %s: %w", want.Name, err)
	}
	var got batchv1.Job
	if err := r.APIReader.Get(ctx, client.ObjectKeyFromObject(want), &got); err != nil {
		return nil, false, fmt.Errorf("read existing Job %s: %w", want.Name, err)
	}
	if !metav1.IsControlledBy(&got, owner) {
		return nil, false, errJobNameTaken
	}
	return &got, false, nil
}

func (r *ModelLineReconciler) jobNameTaken(line *v1alpha1.ModelLine, v *v1alpha1.ModelVersion, name string, p *pass) error {
	msg := fmt.Sprintf("a Job named %s exists and does not belong to this version; delete or rename it, then create a new version", name)
	p.setPhase(v, v1alpha1.PhaseFailed, reasonJobNameTaken, msg)
	p.event(v, line, corev1.EventTypeWarning, reasonJobNameTaken, "%s", msg)
	finished(line, v, p, "Failed")
	return nil
}

// findJob returns the version's Job for a role: from the cache, or, right
// after its creation when the cache may lag, from the API server. nil means
// it does not exist.
func (r *ModelLineReconciler) findJob(ctx context.Context, vw *view, v *v1alpha1.ModelVersion, role string) (*batchv1.Job, error) {
	name := jobName(v.Name, role)
	if job := vw.jobs[name]; job != nil {
		return job, nil
	}
	var job batchv1.Job
	err := r.APIReader.Get(ctx, types.NamespacedName{Namespace: v.Namespace, Name: name}, &job)
	if apierrors.IsNotFound(err) {
		return nil, nil
	}
	if err != nil {
		return nil, fmt.Errorf("read Job %s: %w", name, err)
	}
	return &job, nil
}

// watchTraining follows the training Job to its end.
func (r *ModelLineReconciler) watchTraining(ctx context.Context, line *v1alpha1.ModelLine, vw *view, v *v1alpha1.ModelVersion, p *pass) error {
	job, err := r.findJob(ctx, vw, v, roleTraining)
	if err != nil {
		return err
	}
	if job == nil || !metav1.IsControlledBy(job, v) {
		msg := fmt.Sprintf("training Job %s was deleted before it finished", jobName(v.Name, roleTraining))
		p.setPhase(v, v1alpha1.PhaseFailed, reasonTrainingLost, msg)
		p.setCond(v, v1alpha1.ConditionTrained, metav1.ConditionFalse, reasonTrainingLost, msg)
		p.event(v, line, corev1.EventTypeWarning, reasonTrainingLost, "%s", msg)
		p.event(line, v, corev1.EventTypeWarning, "TrainingFailed", "version %s: %s", v.Name, msg)
		finished(line, v, p, "Failed")
		return nil
	}
	switch outcome, reason, message := jobResult(job); outcome {
	case jobFailed:
		msg := fmt.Sprintf("training Job %s failed: %s: %s", job.Name, reason, message)
		p.setPhase(v, v1alpha1.PhaseFailed, reason, msg)
		p.setCond(v, v1alpha1.ConditionTrained, metav1.ConditionFalse, reason, msg)
		p.event(v, line, corev1.EventTypeWarning, "TrainingFailed", "%s", msg)
		p.event(line, v, corev1.EventTypeWarning, "TrainingFailed", "version %s: %s", v.Name, msg)
		finished(line, v, p, "Failed")
	case jobSucceeded:
		p.setCond(v, v1alpha1.ConditionTrained, metav1.ConditionTrue, "TrainingSucceeded", fmt.Sprintf("training Job %s succeeded; artifact %s", job.Name, v.Spec.ArtifactURI))
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
func (r *ModelLineReconciler) startEvaluation(ctx context.Context, line *v1alpha1.ModelLine, vw *view, v *v1alpha1.ModelVersion, w *dataWindow, p *pass) error {
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
	p.setCond(v, v1alpha1.ConditionEvaluated, metav1.ConditionUnknown, "EvaluationStarted", msg)
	if created {
		p.event(v, line, corev1.EventTypeNormal, "EvaluationStarted", "%s", msg)
	}
	return nil
}

// watchEvaluation follows the gate Job, reads its report and judges it.
func (r *ModelLineReconciler) watchEvaluation(ctx context.Context, line *v1alpha1.ModelLine, vw *view, v *v1alpha1.ModelVersion, p *pass) error {
	job, err := r.findJob(ctx, vw, v, roleGate)
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
func (r *ModelLineReconciler) judgeGateJob(ctx context.Context, line *v1alpha1.ModelLine, job *batchv1.Job, p *pass) (v1alpha1.GateResult, bool, error) {
	baseline := job.Annotations[baselineVersionAnnotation]
	refuse := func(reason, msg string) (v1alpha1.GateResult, bool, error) {
		return v1alpha1.GateResult{Verdict: v1alpha1.GateFailed, Reason: reason, Message: text.Truncate(msg, 4000), BaselineVersion: baseline, EvaluatedTime: &p.now}, true, nil
	}
	outcome, reason, message := jobResult(job)
	if outcome == jobRunning {
		return v1alpha1.GateResult{}, false, nil
	}
	var pods corev1.PodList
	if err := r.APIReader.List(ctx, &pods, client.InNamespace(job.Namespace), client.MatchingLabels{batchv1.ControllerUidLabel: string(job.UID)}); err != nil {
		return v1alpha1.GateResult{}, false, fmt.Errorf("list Pods of Job %s: %w", job.Name, err)
	}
	raw, pod, found := terminationMessage(job, pods.Items)
	if outcome == jobFailed {
		detail := ""
		if found && raw != "" {
			detail = fmt.Sprintf("; Pod %s said: %s", pod, text.Truncate(raw, 400))
		}
		return refuse(reasonEvaluationFailed, fmt.Sprintf("evaluation Job %s failed: %s: %s%s", job.Name, reason, message, detail))
	}
	if !found {
		return refuse(gatereport.ReasonMissing, fmt.Sprintf("evaluation Job %s completed but none of its Pods is left with a report (a short ttlSecondsAfterFinished can remove them)", job.Name))
	}
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
func (r *ModelLineReconciler) rejectReport(line *v1alpha1.ModelLine, vw *view, v *v1alpha1.ModelVersion, p *pass, reason, msg, baseline string) {
	r.judged(line, vw, v, p, v1alpha1.GateResult{Verdict: v1alpha1.GateFailed, Reason: reason, Message: text.Truncate(msg, 4000), BaselineVersion: baseline, EvaluatedTime: &p.now})
}

// judged records a gate result and moves the version on: rejected, waiting
// for a person, or promoting.
func (r *ModelLineReconciler) judged(line *v1alpha1.ModelLine, vw *view, v *v1alpha1.ModelVersion, p *pass, res v1alpha1.GateResult) {
	v.Status.Gate = &res
	p.countFor(v.Name, func() {
		gateDecisions.WithLabelValues(line.Namespace, line.Name, string(res.Verdict), res.Reason).Inc()
	})
	evaluated := metav1.ConditionTrue
	if res.Reason == reasonEvaluationFailed || res.Reason == reasonEvaluationLost || res.Reason == gatereport.ReasonMissing {
		evaluated = metav1.ConditionFalse
	}
	p.setCond(v, v1alpha1.ConditionEvaluated, evaluated, res.Reason, res.Message)
	if res.Verdict != v1alpha1.GatePassed {
		p.setCond(v, v1alpha1.ConditionGatePassed, metav1.ConditionFalse, res.Reason, res.Message)
		p.setPhase(v, v1alpha1.PhaseRejected, res.Reason, "gate failed: "+res.Message)
		p.event(v, line, corev1.EventTypeWarning, "GateFailed", "%s: %s", res.Reason, res.Message)
		p.event(line, v, corev1.EventTypeWarning, "GateFailed", "version %s rejected, live version unchanged: %s: %s", v.Name, res.Reason, res.Message)
		finished(line, v, p, "Rejected")
		return
	}
	p.setCond(v, v1alpha1.ConditionGatePassed, metav1.ConditionTrue, res.Reason, res.Message)
	p.event(v, line, corev1.EventTypeNormal, "GatePassed", "%s", res.Message)
	switch {
	case line.Spec.Gate.Approval == v1alpha1.ApprovalManual && v.Spec.Decision != v1alpha1.DecisionApproved:
		msg := fmt.Sprintf("passed the gate; waiting for a person: kubectl patch modelversion %s -n %s --type=merge -p '{\"spec\":{\"decision\":\"Approved\"}}' (or \"Rejected\")", v.Name, v.Namespace)
		p.setPhase(v, v1alpha1.PhaseAwaitingApproval, reasonWaitingDecision, msg)
		p.setCond(v, v1alpha1.ConditionApproved, metav1.ConditionUnknown, reasonWaitingDecision, "waiting for spec.decision")
		p.event(line, v, corev1.EventTypeNormal, "AwaitingApproval", "version %s passed the gate and waits for a person's decision", v.Name)
	case line.Spec.Gate.Approval == v1alpha1.ApprovalManual:
		v.Status.DecisionTime = &p.now
		p.setCond(v, v1alpha1.ConditionApproved, metav1.ConditionTrue, reasonApprovedByPerson, noteOr(v.Spec.DecisionNote, "approved by a person before the gate decided"))
		startPromotion(line, vw, v, p, reasonApprovedByPerson, "passed the gate, approved beforehand")
	default:
		p.setCond(v, v1alpha1.ConditionApproved, metav1.ConditionTrue, reasonApprovedAuto, "the line's approval is Automatic")
		startPromotion(line, vw, v, p, reasonApprovedAuto, "passed the gate")
	}
}

// promotionKind is why a version was last rolled out.
func promotionKind(v *v1alpha1.ModelVersion) v1alpha1.PromotionKind {
	if v == nil || v.Status.Promotion == nil || v.Status.Promotion.Kind == "" {
		return v1alpha1.PromotionCandidate
	}
	return v.Status.Promotion.Kind
}

// startPromotion moves a version to Promoting, recording what the serving
// Deployment serves now so a failed rollout can restore it. The Deployment
// is patched only in a later pass, after this record is written.
func startPromotion(line *v1alpha1.ModelLine, vw *view, v *v1alpha1.ModelVersion, p *pass, reason, why string) {
	startPromotionAs(line, vw, v, p, v1alpha1.PromotionCandidate, reason, why)
}

// startPromotionAs is startPromotion for a kind of switch.
func startPromotionAs(line *v1alpha1.ModelLine, vw *view, v *v1alpha1.ModelVersion, p *pass, kind v1alpha1.PromotionKind, reason, why string) {
	from := v1alpha1.PromotionStatus{Kind: kind, StartedTime: &p.now, Sequence: vw.nextSequence()}
	if live := vw.live(); live != nil {
		from.FromVersion = live.Name
	}
	if vw.deployment != nil {
		now := servedBy(vw.deployment, line.Spec.Serving)
		from.FromArtifactURI = now.artifact
		if from.FromVersion == "" && now.version != v.Name {
			from.FromVersion = now.version
		}
	}
	v.Status.Promotion = &from
	if p.rolloutDecided == nil {
		p.rolloutDecided = map[string]bool{}
	}
	p.rolloutDecided[v.Name] = true
	msg := fmt.Sprintf("%s; rolling out to Deployment %s", why, line.Spec.Serving.DeploymentName)
	p.setPhase(v, v1alpha1.PhasePromoting, reason, msg)
	p.setCond(v, v1alpha1.ConditionLive, metav1.ConditionUnknown, reasonRollingOut, msg)
	p.event(v, line, corev1.EventTypeNormal, "PromotionStarted", "rolling out %s to Deployment %s (replacing %s)", v.Spec.ArtifactURI, line.Spec.Serving.DeploymentName, orNone(from.FromVersion))
}

func orNone(s string) string {
	if s == "" {
		return "nothing"
	}
	return s
}

// promote rolls the serving Deployment out to the version and watches the
// rollout to its end.
func (r *ModelLineReconciler) promote(ctx context.Context, line *v1alpha1.ModelLine, vw *view, v *v1alpha1.ModelVersion, p *pass) error {
	if v.Status.Promotion == nil {
		startPromotion(line, vw, v, p, v.Status.Reason, "the rollout starts")
		return nil
	}
	dep := vw.deployment
	want := served{artifact: v.Spec.ArtifactURI, version: v.Name}
	if servedBy(dep, line.Spec.Serving) != want {
		patched, err := r.patchServing(ctx, dep, line.Spec.Serving, want)
		if err != nil {
			return err
		}
		dep = patched
		vw.deployment = patched
	}
	state, msg := rolloutState(dep)
	switch state {
	case rolloutProgressing:
		v.Status.Message = "rolling out: " + msg
	case rolloutFailed:
		p.setPhase(v, v1alpha1.PhaseFailed, reasonRolloutFailed, msg+"; the Deployment is being restored to "+orNone(v.Status.Promotion.FromVersion))
		p.setCond(v, v1alpha1.ConditionLive, metav1.ConditionFalse, reasonRolloutFailed, msg)
		p.event(v, line, corev1.EventTypeWarning, reasonRolloutFailed, "%s", msg)
		p.event(line, v, corev1.EventTypeWarning, reasonRolloutFailed, "version %s: %s; restoring %s", v.Name, msg, orNone(v.Status.Promotion.FromVersion))
		p.countFor(v.Name, func() { rolloutFailures.WithLabelValues(line.Namespace, line.Name).Inc() })
		finished(line, v, p, "Failed")
	case rolloutComplete:
		v.Status.PromotedTime = &p.now
		v.Status.ArchivedTime = nil
		msg := fmt.Sprintf("serving on Deployment %s (%s)", dep.Name, msg)
		p.setPhase(v, v1alpha1.PhaseLive, reasonPromoted, msg)
		p.setCond(v, v1alpha1.ConditionLive, metav1.ConditionTrue, reasonPromoted, msg)
		p.event(v, line, corev1.EventTypeNormal, reasonPromoted, "%s", msg)
		from := orNone(v.Status.Promotion.FromVersion)
		switch promotionKind(v) {
		case v1alpha1.PromotionCandidate:
			p.event(line, v, corev1.EventTypeNormal, reasonPromoted, "version %s is live (replacing %s)", v.Name, from)
			p.countFor(v.Name, func() { promotions.WithLabelValues(line.Namespace, line.Name).Inc() })
			finished(line, v, p, "Promoted")
		case v1alpha1.PromotionRollback:
			p.event(line, v, corev1.EventTypeWarning, "RolledBack", "version %s serves again in place of %s, which regressed", v.Name, from)
		case v1alpha1.PromotionFallback:
			p.event(line, v, corev1.EventTypeWarning, "FallbackServing", "rule-based version %s serves in place of %s", v.Name, from)
		case v1alpha1.PromotionAlternative:
			p.event(line, v, corev1.EventTypeWarning, "AlternativeServing", "version %s, which beat %s on the golden set, serves in its place", v.Name, from)
		case v1alpha1.PromotionRequested:
			p.event(line, v, corev1.EventTypeNormal, "RollbackDone", "version %s serves again, as requested, in place of %s", v.Name, from)
		}
	}
	return nil
}

// revertFailedRollouts restores the Deployment after a failed rollout: a
// version that failed its rollout and that the Deployment still names goes
// back to what it replaced. It runs in the pass after the failure was
// recorded, so a crash in between cannot start the rollout again.
func (r *ModelLineReconciler) revertFailedRollouts(ctx context.Context, line *v1alpha1.ModelLine, vw *view, p *pass) error {
	if vw.deployment == nil {
		return nil
	}
	cur := servedBy(vw.deployment, line.Spec.Serving)
	for _, v := range vw.versions {
		if v.Status.Phase != v1alpha1.PhaseFailed || v.Status.Reason != reasonRolloutFailed || v.Status.Promotion == nil || cur.version != v.Name {
			continue
		}
		back := served{artifact: v.Status.Promotion.FromArtifactURI, version: v.Status.Promotion.FromVersion}
		patched, err := r.patchServing(ctx, vw.deployment, line.Spec.Serving, back)
		if err != nil {
			return err
		}
		vw.deployment = patched
		failure := "rollout failed"
		if c := meta.FindStatusCondition(v.Status.Conditions, v1alpha1.ConditionLive); c != nil {
			failure = c.Message
		}
		v.Status.Message = text.Truncate(fmt.Sprintf("%s; Deployment %s restored to %s (%s)", failure, patched.Name, orNone(back.version), back.artifact), 2000)
		p.event(line, v, corev1.EventTypeNormal, "RolloutReverted", "Deployment %s restored to %s after the failed rollout of %s", patched.Name, orNone(back.version), v.Name)
		return nil
	}
	return nil
}

// patchServing patches the Deployment to serve an artifact and returns it as
// the API server has it after the patch.
func (r *ModelLineReconciler) patchServing(ctx context.Context, dep *appsv1.Deployment, s v1alpha1.ServingSpec, to served) (*appsv1.Deployment, error) {
	data, err := servePatch(s, to)
	if err != nil {
		return nil, err
	}
	patched := dep.DeepCopy()
	if err := r.Patch(ctx, patched, client.RawPatch(types.StrategicMergePatchType, data)); err != nil {
		return nil, fmt.Errorf("patch Deployment %s to serve %s: %w", dep.Name, orNone(to.version), err)
	}
	return patched, nil
}

// prune deletes the finished versions history no longer keeps.
func (r *ModelLineReconciler) prune(ctx context.Context, line *v1alpha1.ModelLine, vw *view, p *pass) error {
	limit := int32(10)
	if line.Spec.HistoryLimit != nil {
		limit = *line.Spec.HistoryLimit
	}
	live, previous := "", ""
	if l := vw.live(); l != nil {
		live = l.Name
		if l.Status.Promotion != nil {
			previous = l.Status.Promotion.FromVersion
		}
	}
	for _, v := range pruneList(vw.versions, live, previous, limit) {
		if err := r.Delete(ctx, v, client.Preconditions{UID: &v.UID}); client.IgnoreNotFound(err) != nil {
			return fmt.Errorf("prune version %s: %w", v.Name, err)
		}
		now := p.now
		v.DeletionTimestamp = &now
		p.eventFor("Prune/"+v.Name, line, nil, corev1.EventTypeNormal, "Pruned", "deleted %s version %s: history keeps %d finished versions (spec.historyLimit)", v.Status.Phase, v.Name, limit)
	}
	return nil
}
