package modelline

import (
	"testing"

	"k8s.io/utils/ptr"
	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/speccheck"
)

// The spec check runs once per generation of a line: a pass over the same
// generation gets the problems it found, an edited spec (a new generation)
// or a new object of the same name is checked anew, and a caller that adds
// to the problems does not change what is kept.
func TestSpecChecksByGeneration(t *testing.T) {
	line := &v1alpha1.ModelLine{}
	line.Namespace, line.Name, line.UID, line.Generation = "larkspur", "late-risk", "uid-1", 1
	line.Spec.Triggers = []v1alpha1.TriggerSpec{{Name: "auc-drop", Query: "avg(", Below: ptr.To(0.7), ForSeconds: 60, EverySeconds: 60}}
	var c specChecks
	first := c.problems(line)
	if !hasProblem(first, "spec.triggers[0].query") {
		t.Fatalf("problems of a bad query: %v", first)
	}
	_ = append(first, speccheck.Problem{Field: "spec.fallback", Message: "added by the caller"})
	// Same generation: the spec is not read again (the edit below is not
	// seen until the generation moves, as the API server would move it).
	line.Spec.Triggers[0].Query = "avg(auc)"
	if again := c.problems(line); len(again) != len(first) || again[0] != first[0] {
		t.Errorf("same generation: %v, want the kept %v", again, first)
	}
	line.Generation = 2
	if now := c.problems(line); hasProblem(now, "spec.triggers[0].query") {
		t.Errorf("new generation with a good query: %v", now)
	}
	line.Spec.Triggers[0].Query = "avg("
	line.UID = "uid-2" // deleted and made again under the same name, generation 2 again
	if now := c.problems(line); !hasProblem(now, "spec.triggers[0].query") {
		t.Error("a new object of the same name kept the old object's answer")
	}
}

func hasProblem(ps []speccheck.Problem, field string) bool {
	for _, p := range ps {
		if p.Field == field {
			return true
		}
	}
	return false
}
