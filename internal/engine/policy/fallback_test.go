package policy

import (
	"strings"
	"testing"

	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/utils/ptr"

	"plumbline.dev/plumbline/api/v1alpha1"
)

func TestFallbacks(t *testing.T) {
	mk := func(name string, phase v1alpha1.VersionPhase, source v1alpha1.VersionSource) *v1alpha1.ModelVersion {
		return &v1alpha1.ModelVersion{ObjectMeta: metav1.ObjectMeta{Name: name},
			Spec: v1alpha1.ModelVersionSpec{Source: source}, Status: v1alpha1.ModelVersionStatus{Phase: phase}}
	}
	cases := []struct {
		name   string
		mutate func(spec *v1alpha1.FallbackSpec, v0, v1, rules *v1alpha1.ModelVersion) *v1alpha1.FallbackSpec
		want   []string // version/kind, best first
		why    string   // part of the explanation when nothing qualifies
	}{
		{"previous then rules", nil, []string{"v0/Rollback", "rules/Fallback"}, ""},
		{"previous rolled back", func(s *v1alpha1.FallbackSpec, v0, _, _ *v1alpha1.ModelVersion) *v1alpha1.FallbackSpec {
			v0.Status.Reason = v1alpha1.ReasonRolledBack
			return s
		}, []string{"rules/Fallback"}, ""},
		{"previous not archived", func(s *v1alpha1.FallbackSpec, v0, _, _ *v1alpha1.ModelVersion) *v1alpha1.FallbackSpec {
			v0.Status.Phase = v1alpha1.PhaseFailed
			return s
		}, []string{"rules/Fallback"}, ""},
		{"previous switched off", func(s *v1alpha1.FallbackSpec, _, _, _ *v1alpha1.ModelVersion) *v1alpha1.FallbackSpec {
			s.Previous = ptr.To(false)
			return s
		}, []string{"rules/Fallback"}, ""},
		{"rules not in reserve", func(s *v1alpha1.FallbackSpec, v0, _, rules *v1alpha1.ModelVersion) *v1alpha1.FallbackSpec {
			v0.Status.Reason = v1alpha1.ReasonRolledBack
			rules.Status.Phase = v1alpha1.PhaseFailed
			return s
		}, nil, "rule-based version rules is Failed, not in reserve (Standby)"},
		{"rules rolling out", func(s *v1alpha1.FallbackSpec, _, _, rules *v1alpha1.ModelVersion) *v1alpha1.FallbackSpec {
			rules.Status.Phase = v1alpha1.PhasePromoting
			return s
		}, []string{"v0/Rollback"}, ""},
		{"no fallback spec, no previous", func(_ *v1alpha1.FallbackSpec, _, v1, _ *v1alpha1.ModelVersion) *v1alpha1.FallbackSpec {
			v1.Status.Promotion.FromVersion = ""
			return nil
		}, nil, "no version served before it; no spec.fallback.ruleBasedVersion"},
		{"previous was the rules", func(s *v1alpha1.FallbackSpec, _, v1, _ *v1alpha1.ModelVersion) *v1alpha1.FallbackSpec {
			v1.Status.Promotion.FromVersion = "rules"
			return s
		}, []string{"rules/Fallback"}, ""},
		{"previous gone", func(s *v1alpha1.FallbackSpec, _, v1, _ *v1alpha1.ModelVersion) *v1alpha1.FallbackSpec {
			v1.Status.Promotion.FromVersion = "v-pruned"
			s.RuleBasedVersion = ""
			return s
		}, nil, "previous version v-pruned no longer exists"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			v0 := mk("v0", v1alpha1.PhaseArchived, v1alpha1.SourceImported)
			v1 := mk("v1", v1alpha1.PhaseLive, v1alpha1.SourceTrained)
			v1.Status.Promotion = &v1alpha1.PromotionStatus{FromVersion: "v0"}
			rules := mk("rules", v1alpha1.PhaseStandby, v1alpha1.SourceRuleBased)
			spec := &v1alpha1.FallbackSpec{RuleBasedVersion: "rules"}
			if c.mutate != nil {
				spec = c.mutate(spec, v0, v1, rules)
			}
			byName := func(n string) *v1alpha1.ModelVersion {
				for _, v := range []*v1alpha1.ModelVersion{v0, v1, rules} {
					if v.Name == n {
						return v
					}
				}
				return nil
			}
			got, why := Fallbacks(spec, v1, byName)
			var names []string
			for _, f := range got {
				names = append(names, f.Version.Name+"/"+string(f.Kind))
			}
			if strings.Join(names, ",") != strings.Join(c.want, ",") {
				t.Errorf("fallbacks %v, want %v (why: %s)", names, c.want, why)
			}
			if c.why != "" && !strings.Contains(why, c.why) {
				t.Errorf("why %q does not say %q", why, c.why)
			}
		})
	}
}
