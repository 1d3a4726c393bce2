package modelline

import (
	"slices"

	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// versionStatusEqual reports whether two version statuses are the same, as
// equality.Semantic.DeepEqual would (times by the instant, nil and empty
// lists alike) but field by field, without reflection: every pass compares
// each of its line's versions before deciding to write nothing, and the
// reflective comparison was a tenth of a busy manager's CPU. A field added
// to the status must be added here; TestVersionStatusEqualSeesEveryField
// fails until it is.
func versionStatusEqual(a, b *v1alpha1.ModelVersionStatus) bool {
	return a.ObservedGeneration == b.ObservedGeneration && a.Phase == b.Phase && a.Number == b.Number &&
		a.TrainingJob == b.TrainingJob && a.GateJob == b.GateJob &&
		timeEqual(a.DataFrom, b.DataFrom) && timeEqual(a.DataTo, b.DataTo) &&
		gateEqual(a.Gate, b.Gate) && promotionEqual(a.Promotion, b.Promotion) &&
		a.Reason == b.Reason && a.Message == b.Message &&
		timeEqual(a.DecisionTime, b.DecisionTime) && timeEqual(a.PromotedTime, b.PromotedTime) && timeEqual(a.ArchivedTime, b.ArchivedTime) &&
		slices.EqualFunc(a.Conditions, b.Conditions, conditionEqual)
}

func timeEqual(a, b *metav1.Time) bool {
	if a == nil || b == nil {
		return a == b
	}
	return a.Equal(b)
}

func gateEqual(a, b *v1alpha1.GateResult) bool {
	if a == nil || b == nil {
		return a == b
	}
	return a.BaselineVersion == b.BaselineVersion && a.Verdict == b.Verdict && a.Reason == b.Reason && a.Message == b.Message &&
		a.Rows == b.Rows && a.MustPassFailed == b.MustPassFailed && timeEqual(a.EvaluatedTime, b.EvaluatedTime) &&
		slices.Equal(a.Criteria, b.Criteria) // CriterionResult has only comparable fields
}

func promotionEqual(a, b *v1alpha1.PromotionStatus) bool {
	if a == nil || b == nil {
		return a == b
	}
	return a.Kind == b.Kind && a.Sequence == b.Sequence && a.FromVersion == b.FromVersion &&
		a.FromArtifactURI == b.FromArtifactURI && timeEqual(a.StartedTime, b.StartedTime)
}

func conditionEqual(a, b metav1.Condition) bool {
	return a.Type == b.Type && a.Status == b.Status && a.ObservedGeneration == b.ObservedGeneration &&
		a.LastTransitionTime.Equal(&b.LastTransitionTime) && a.Reason == b.Reason && a.Message == b.Message
}
