package modelline

import (
	"slices"
	"strconv"
	"testing"
	"time"

	appsv1 "k8s.io/api/apps/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/types"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// historyFixture is a line's versions in which each thing a pass reads from
// its versions has its newest in a different finished version, besides the
// live one, the one it replaced, the one the Deployment serves, a
// rule-based one and one the line does not control. Only a and a2 bear on
// nothing.
func historyFixture() (*v1alpha1.ModelLine, *view) {
	line := &v1alpha1.ModelLine{ObjectMeta: metav1.ObjectMeta{Name: "late-risk", Namespace: "larkspur", UID: types.UID("line-uid"), Generation: 3},
		Spec: v1alpha1.ModelLineSpec{Serving: v1alpha1.ServingSpec{DeploymentName: "late-risk-scorer", ContainerName: "scorer"}}}
	at := func(h int) *metav1.Time {
		t := metav1.NewTime(time.Date(2026, 11, 20, h, 0, 0, 0, time.UTC))
		return &t
	}
	owned := []metav1.OwnerReference{*metav1.NewControllerRef(line, v1alpha1.GroupVersion.WithKind("ModelLine"))}
	mk := func(name string, created int, phase v1alpha1.VersionPhase, edit func(v *v1alpha1.ModelVersion)) *v1alpha1.ModelVersion {
		v := version(name, created, phase, v1alpha1.SourceTrained)
		v.Namespace, v.OwnerReferences = line.Namespace, owned
		v.Labels = map[string]string{numberLabel: strconv.Itoa(created)}
		v.Status.Message = name + " finished"
		if edit != nil {
			edit(v)
		}
		return v
	}
	trained := func(v *v1alpha1.ModelVersion) {
		v.Status.Conditions = []metav1.Condition{{Type: v1alpha1.ConditionTrained, Status: metav1.ConditionTrue, Reason: "JobSucceeded"}}
	}
	vs := []*v1alpha1.ModelVersion{
		mk("g", 0, v1alpha1.PhaseArchived, nil), // replaced by the live one
		mk("a", 1, v1alpha1.PhaseArchived, func(v *v1alpha1.ModelVersion) {
			v.Status.DataTo = at(1)
			trained(v)
			v.Status.Promotion = &v1alpha1.PromotionStatus{Kind: v1alpha1.PromotionRollback, Sequence: 1, StartedTime: at(1)}
		}),
		mk("a2", 1, v1alpha1.PhaseRejected, func(v *v1alpha1.ModelVersion) { v.Status.DataTo = at(2); trained(v) }),
		mk("b", 2, v1alpha1.PhaseArchived, func(v *v1alpha1.ModelVersion) { // the guard's last switch
			v.Status.Promotion = &v1alpha1.PromotionStatus{Kind: v1alpha1.PromotionRollback, Sequence: 2, StartedTime: at(9)}
		}),
		mk("c", 3, v1alpha1.PhaseFailed, func(v *v1alpha1.ModelVersion) { v.Status.DataTo = at(8) }),                                       // newest data window
		mk("d", 4, v1alpha1.PhaseRejected, func(v *v1alpha1.ModelVersion) { v.Status.DataTo = at(7); trained(v) }),                         // newest trained
		mk("e", 5, v1alpha1.PhaseArchived, func(v *v1alpha1.ModelVersion) { v.Status.Promotion = &v1alpha1.PromotionStatus{Sequence: 9} }), // highest sequence
		mk("f", 6, v1alpha1.PhaseRejected, func(v *v1alpha1.ModelVersion) { v.Labels[numberLabel] = "99" }),                                // highest number
		mk("live", 7, v1alpha1.PhaseLive, func(v *v1alpha1.ModelVersion) {
			v.Status.Promotion = &v1alpha1.PromotionStatus{Kind: v1alpha1.PromotionCandidate, Sequence: 8, FromVersion: "g"}
			v.Status.PromotedTime = at(6)
		}),
		mk("s", 8, v1alpha1.PhaseFailed, nil), // what the Deployment serves
		mk("rules", 8, v1alpha1.PhaseFailed, func(v *v1alpha1.ModelVersion) { v.Spec.Source = v1alpha1.SourceRuleBased }),
		mk("x", 8, v1alpha1.PhaseArchived, func(v *v1alpha1.ModelVersion) { v.OwnerReferences = nil }),
		mk("h", 9, v1alpha1.PhaseRejected, nil), // the line's last outcome
	}
	byAge(vs)
	dep := &appsv1.Deployment{}
	dep.Spec.Template.Annotations = map[string]string{v1alpha1.VersionAnnotation: "s"}
	return line, &view{versions: vs, deployment: dep}
}

func names(vs []*v1alpha1.ModelVersion) []string {
	var out []string
	for _, v := range vs {
		out = append(out, v.Name)
	}
	return out
}

// Only versions that bear on nothing become history, and leaving them out
// changes none of what the line derives from its versions: its summary and
// conditions, the next promotion's sequence, the next data window.
func TestHistoryLeavesTheLinesSummariesAlone(t *testing.T) {
	line, vw := historyFixture()
	got := names(forHistory(line, vw))
	if want := []string{"a", "a2"}; !slices.Equal(got, want) {
		t.Fatalf("history %v, want %v", got, want)
	}

	without := &view{deployment: vw.deployment}
	for _, v := range vw.versions {
		if !slices.Contains(got, v.Name) {
			without.versions = append(without.versions, v)
		}
	}
	now := metav1.NewTime(time.Date(2026, 11, 21, 0, 0, 0, 0, time.UTC))
	all, kept := line.DeepCopy(), line.DeepCopy()
	summarize(all, vw, now)
	summarize(kept, without, now)
	if all.Status.VersionCount != 99 || all.Status.LastRollbackTime == nil || all.Status.LastRetrainTime == nil || all.Status.ActiveVersion != "" {
		t.Fatalf("the fixture does not exercise the summary: %+v", all.Status)
	}
	if d := diffStatus(all.Status, kept.Status); d != "" {
		t.Errorf("the line's summary changed without its history versions: %s", d)
	}
	if a, b := vw.nextSequence(), without.nextSequence(); a != b || a != 10 {
		t.Errorf("next sequence %d with history, %d without (want 10)", a, b)
	}
	a, b := lastTrainedUntil(vw, nil), lastTrainedUntil(without, nil)
	if a == nil || b == nil || !a.Equal(*b) {
		t.Errorf("next data window starts at %v with history, %v without", a, b)
	}

	// Once labelled, a pass no longer sees them, and finds nothing more
	// to label: the label is written once.
	if again := forHistory(line, without); len(again) != 0 {
		t.Errorf("a second pass labels %v too", names(again))
	}
}

func diffStatus(a, b v1alpha1.ModelLineStatus) string {
	switch {
	case a.VersionCount != b.VersionCount:
		return "versionCount " + strconv.Itoa(int(a.VersionCount)) + " vs " + strconv.Itoa(int(b.VersionCount))
	case !a.LastRetrainTime.Equal(b.LastRetrainTime):
		return "lastRetrainTime"
	case !a.LastRollbackTime.Equal(b.LastRollbackTime):
		return "lastRollbackTime"
	case !a.LastPromotionTime.Equal(b.LastPromotionTime):
		return "lastPromotionTime"
	case a.LiveVersion != b.LiveVersion || a.PreviousVersion != b.PreviousVersion || a.ActiveVersion != b.ActiveVersion:
		return "live, previous or active version"
	}
	for _, c := range a.Conditions {
		for _, d := range b.Conditions {
			if c.Type == d.Type && (c.Status != d.Status || c.Reason != d.Reason || c.Message != d.Message) {
				return "condition " + c.Type + ": " + c.Message + " vs " + d.Message
			}
		}
	}
	if len(a.Conditions) != len(b.Conditions) {
		return "conditions"
	}
	return ""
}
