package controllers

import (
	"encoding/json"
	"fmt"

	appsv1 "k8s.io/api/apps/v1"
	corev1 "k8s.io/api/core/v1"

	"plumbline.dev/plumbline/api/v1alpha1"
)

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
