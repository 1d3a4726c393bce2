package modelline

import (
	"testing"

	"k8s.io/utils/ptr"

	"plumbline.dev/plumbline/api/v1alpha1"
)

func TestAlternatives(t *testing.T) {
	names := func(vs []*v1alpha1.ModelVersion) []string {
		var out []string
		for _, v := range vs {
			out = append(out, v.Name)
		}
		return out
	}
	line, vw, v0, _, rules := guardFixture()
	if got := names(alternatives(line, vw)); len(got) != 2 || got[0] != "v0" || got[1] != "rules" {
		t.Errorf("alternatives %v, want [v0 rules]", got)
	}
	v0.Status.Reason = v1alpha1.ReasonRolledBack
	if got := names(alternatives(line, vw)); len(got) != 1 || got[0] != "rules" {
		t.Errorf("with v0 rolled back: %v", got)
	}
	v0.Status.Reason = ""
	line.Spec.Fallback.Previous = ptr.To(false)
	if got := names(alternatives(line, vw)); len(got) != 1 || got[0] != "rules" {
		t.Errorf("previous off: %v", got)
	}
	line.Spec.Fallback.Previous = nil
	rules.Status.Phase = v1alpha1.PhasePromoting
	if got := names(alternatives(line, vw)); len(got) != 1 || got[0] != "v0" {
		t.Errorf("rules busy: %v", got)
	}
}

func TestBestAlternative(t *testing.T) {
	line := &v1alpha1.ModelLine{}
	line.Spec.Gate.Criteria = []v1alpha1.GateCriterion{{Metric: "roc_auc", Minimum: ptr.To(0.8)}}
	cs := []v1alpha1.AlternativeResult{
		{Version: "v0", Verdict: v1alpha1.GatePassed, Score: "0.81"},
		{Version: "rules", Verdict: v1alpha1.GatePassed, Score: "0.83"},
		{Version: "v-1", Verdict: v1alpha1.GateFailed, Score: "0.95"},
	}
	if b := bestAlternative(line, cs); b == nil || b.Version != "rules" {
		t.Errorf("best %+v, want rules (highest passing roc_auc)", b)
	}
	line.Spec.Gate.Criteria[0] = v1alpha1.GateCriterion{Metric: "log_loss", Maximum: ptr.To(0.5)}
	if b := bestAlternative(line, cs); b == nil || b.Version != "v0" {
		t.Errorf("best %+v, want v0 (lowest passing log loss)", b)
	}
	cs[0].Verdict, cs[1].Verdict = v1alpha1.GateFailed, v1alpha1.GateFailed
	if b := bestAlternative(line, cs); b != nil {
		t.Errorf("best %+v with none passing", b)
	}
}
