package v1alpha1

import "time"

// LabelDelay is the label delay of a trigger or the guard: its own
// labelDelaySeconds (override), else the line's spec.labels.delaySeconds,
// else none.
func (s *ModelLineSpec) LabelDelay(override *int32) time.Duration {
	switch {
	case override != nil:
		return time.Duration(*override) * time.Second
	case s.Labels != nil && s.Labels.DelaySeconds != nil:
		return time.Duration(*s.Labels.DelaySeconds) * time.Second
	}
	return 0
}

// LabelsScored says the line's quality points are stamped when they were
// scored (spec.labels.stampedAt Scoring), not at prediction time.
func (s *ModelLineSpec) LabelsScored() bool {
	return s.Labels != nil && s.Labels.StampedAt == StampedAtScoring
}

// ProbationEnd is when the guard's probation of a version promoted at
// promoted ends: probationSeconds after the first of its predictions could
// have a label, so a label delay does not eat into it.
func (s *ModelLineSpec) ProbationEnd(promoted time.Time) time.Time {
	if s.Guard == nil {
		return promoted
	}
	return promoted.Add(s.LabelDelay(s.Guard.LabelDelaySeconds) + time.Duration(s.Guard.ProbationSeconds)*time.Second)
}
