package v1alpha1

import (
	"testing"
	"time"
)

func TestLabelDelayAndProbation(t *testing.T) {
	i32 := func(v int32) *int32 { return &v }
	promoted := time.Date(2026, 11, 2, 6, 0, 0, 0, time.UTC)
	spec := ModelLineSpec{Guard: &GuardSpec{ProbationSeconds: 7200}}
	if d := spec.LabelDelay(nil); d != 0 {
		t.Errorf("no delay anywhere: %s", d)
	}
	if end := spec.ProbationEnd(promoted); !end.Equal(promoted.Add(2 * time.Hour)) {
		t.Errorf("probation without a delay ends %s", end)
	}
	spec.Labels = &LabelsSpec{DelaySeconds: i32(3600)}
	if d := spec.LabelDelay(nil); d != time.Hour {
		t.Errorf("line-wide delay: %s", d)
	}
	if d := spec.LabelDelay(i32(0)); d != 0 {
		t.Errorf("a trigger's own 0 overrides the line's: %s", d)
	}
	// The probation starts counting when the first labels can be in.
	if end := spec.ProbationEnd(promoted); !end.Equal(promoted.Add(3 * time.Hour)) {
		t.Errorf("probation with the line's hour of delay ends %s", end)
	}
	spec.Guard.LabelDelaySeconds = i32(1800)
	if end := spec.ProbationEnd(promoted); !end.Equal(promoted.Add(150 * time.Minute)) {
		t.Errorf("probation with the guard's own delay ends %s", end)
	}
	if spec.LabelsScored() {
		t.Error("stamped at prediction time by default")
	}
	spec.Labels.StampedAt = StampedAtScoring
	if !spec.LabelsScored() {
		t.Error("stampedAt Scoring")
	}
}
