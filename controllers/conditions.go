package controllers

import (
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
)

// setCondition sets c in conds, stamping observedGeneration, and taking the
// transition time from the injected clock when the status changed (the
// apimachinery helper would read the wall clock). It reports whether the
// status, reason or message changed: the cases worth an event.
func setCondition(conds *[]metav1.Condition, c metav1.Condition, generation int64, now metav1.Time) bool {
	c.ObservedGeneration = generation
	old := meta.FindStatusCondition(*conds, c.Type)
	changed := old == nil || old.Status != c.Status || old.Reason != c.Reason || old.Message != c.Message
	if old == nil || old.Status != c.Status {
		c.LastTransitionTime = now
	} else {
		c.LastTransitionTime = old.LastTransitionTime
	}
	meta.SetStatusCondition(conds, c)
	return changed
}

// conditionIs reports whether conds holds condition t with status s.
func conditionIs(conds []metav1.Condition, t string, s metav1.ConditionStatus) bool {
	c := meta.FindStatusCondition(conds, t)
	return c != nil && c.Status == s
}

// setConditionSticky is setCondition for conditions whose message carries a
// live measurement: while the status and reason hold, the message seen when
// they last changed is kept, so an evaluation that finds nothing new writes
// nothing. It reports whether the status or reason changed.
func setConditionSticky(conds *[]metav1.Condition, c metav1.Condition, generation int64, now metav1.Time) bool {
	if old := meta.FindStatusCondition(*conds, c.Type); old != nil && old.Status == c.Status && old.Reason == c.Reason {
		c.Message = old.Message
	}
	return setCondition(conds, c, generation, now)
}
