package modelline

import (
	"context"
	"encoding/json"
	"fmt"

	appsv1 "k8s.io/api/apps/v1"
	corev1 "k8s.io/api/core/v1"
	"k8s.io/apimachinery/pkg/api/meta"
	"k8s.io/apimachinery/pkg/types"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/text"
)

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
			p.event(v, line, corev1.EventTypeNormal, "Archived", "%s", msg)
		case v.Spec.Source == v1alpha1.SourceRuleBased && (v.Status.Phase == "" || v.Status.Phase == v1alpha1.PhasePending):
			p.setPhase(v, v1alpha1.PhaseStandby, reasonStandby, "rule-based version held in reserve as the line's fallback")
		}
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
func (r *Reconciler) promote(ctx context.Context, line *v1alpha1.ModelLine, vw *view, v *v1alpha1.ModelVersion, p *pass) error {
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
		p.event(v, line, corev1.EventTypeWarning, reasonRolloutFailed, "%s", msg)
		p.event(line, v, corev1.EventTypeWarning, reasonRolloutFailed, "version %s: %s; restoring %s", v.Name, msg, orNone(v.Status.Promotion.FromVersion))
		p.countFor(v.Name, func() { rolloutFailures.WithLabelValues(line.Namespace, line.Name).Inc() })
		finished(line, v, p, "Failed")
	case rolloutComplete:
		v.Status.PromotedTime = &p.now
		v.Status.ArchivedTime = nil
		msg := fmt.Sprintf("serving on Deployment %s (%s)", dep.Name, msg)
		p.setPhase(v, v1alpha1.PhaseLive, reasonPromoted, msg)
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
func (r *Reconciler) revertFailedRollouts(ctx context.Context, p *pass) error {
	line, vw := p.line, p.vw
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
func (r *Reconciler) patchServing(ctx context.Context, dep *appsv1.Deployment, s v1alpha1.ServingSpec, to served) (*appsv1.Deployment, error) {
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

// served is what a serving Deployment's pod template says it serves.
type served struct {
	artifact string // the artifact env var's value; "" when unset
	version  string // the plumbline.dev/version annotation; "" when unset
}

// servedBy reads what the Deployment's template serves.
func servedBy(dep *appsv1.Deployment, s v1alpha1.ServingSpec) served {
	var out served
	out.version = dep.Spec.Template.Annotations[v1alpha1.VersionAnnotation]
	for _, c := range dep.Spec.Template.Spec.Containers {
		if c.Name != s.ContainerName {
			continue
		}
		for _, e := range c.Env {
			if e.Name == artifactEnv(s) {
				out.artifact = e.Value
			}
		}
	}
	return out
}

// artifactEnv is the line's artifact variable, defaulted as the API server
// defaults it.
func artifactEnv(s v1alpha1.ServingSpec) string {
	if s.ArtifactEnv == "" {
		return "MODEL_URI"
	}
	return s.ArtifactEnv
}

// servePatch is a strategic merge patch that changes only the artifact
// variable of the serving container and the version annotation of the pod
// template: containers merge by name and env by name, so nothing else in the
// Deployment moves. An empty version removes the annotation; valueFrom is
// cleared so the variable holds the value itself.
func servePatch(s v1alpha1.ServingSpec, to served) ([]byte, error) {
	var annotation any = to.version
	if to.version == "" {
		annotation = nil
	}
	patch := map[string]any{
		"spec": map[string]any{
			"template": map[string]any{
				"metadata": map[string]any{
					"annotations": map[string]any{v1alpha1.VersionAnnotation: annotation},
				},
				"spec": map[string]any{
					"containers": []any{map[string]any{
						"name": s.ContainerName,
						"env": []any{map[string]any{
							"name":      artifactEnv(s),
							"value":     to.artifact,
							"valueFrom": nil,
						}},
					}},
				},
			},
		},
	}
	b, err := json.Marshal(patch)
	if err != nil {
		return nil, fmt.Errorf("encode serving patch: %w", err)
	}
	return b, nil
}

// rollout is how a Deployment's rollout stands.
type rollout int

const (
	rolloutProgressing rollout = iota
	rolloutComplete
	rolloutFailed
)

// rolloutState judges a Deployment's rollout from its status, the way
// `kubectl rollout status` does: the controller must have seen the current
// generation, every replica must be updated and available, and no old replica
// may be left. ProgressDeadlineExceeded on the current generation is a
// failure.
func rolloutState(dep *appsv1.Deployment) (rollout, string) {
	if dep.Status.ObservedGeneration < dep.Generation {
		return rolloutProgressing, fmt.Sprintf("waiting for the Deployment controller to see generation %d", dep.Generation)
	}
	for _, c := range dep.Status.Conditions {
		if c.Type == appsv1.DeploymentProgressing && c.Status == corev1.ConditionFalse && c.Reason == "ProgressDeadlineExceeded" {
			return rolloutFailed, fmt.Sprintf("Deployment %s exceeded its progress deadline: %s", dep.Name, c.Message)
		}
	}
	if dep.Spec.Paused {
		return rolloutProgressing, fmt.Sprintf("Deployment %s is paused; resume it to let the rollout proceed", dep.Name)
	}
	want := int32(1)
	if dep.Spec.Replicas != nil {
		want = *dep.Spec.Replicas
	}
	st := dep.Status
	switch {
	case st.UpdatedReplicas < want:
		return rolloutProgressing, fmt.Sprintf("%d of %d replicas updated", st.UpdatedReplicas, want)
	case st.Replicas > st.UpdatedReplicas:
		return rolloutProgressing, fmt.Sprintf("%d old replicas pending termination", st.Replicas-st.UpdatedReplicas)
	case st.AvailableReplicas < st.UpdatedReplicas:
		return rolloutProgressing, fmt.Sprintf("%d of %d updated replicas available", st.AvailableReplicas, st.UpdatedReplicas)
	}
	return rolloutComplete, fmt.Sprintf("%d of %d replicas updated and available", st.AvailableReplicas, want)
}
