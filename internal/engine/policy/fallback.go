package policy

import (
	"fmt"
	"strings"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// Fallback is a version that may serve in place of the live one without
// training, and the kind of switch to it.
type Fallback struct {
	Version *v1alpha1.ModelVersion
	Kind    v1alpha1.PromotionKind
}

// Fallbacks is the one rule for what may serve in place of the live version
// without training, best first: the guard switches to the first, and an
// evaluation of alternatives judges them all.
//
//   - The version that served before the live one, unless
//     spec.fallback.previous is false, it is gone, it is the rule-based
//     version (that one is judged below), or it is not Archived, or it was
//     itself rolled back: a version the guard took out is never put back
//     automatically.
//   - The rule-based version (spec.fallback.ruleBasedVersion), when it
//     exists, is not what serves, and waits in reserve (Standby): one whose
//     own rollout failed or is under way is not a fallback.
//
// version looks a version of the line up by name (nil when there is none).
// When nothing qualifies, why says what was ruled out.
func Fallbacks(spec *v1alpha1.FallbackSpec, live *v1alpha1.ModelVersion, version func(string) *v1alpha1.ModelVersion) (out []Fallback, why string) {
	if live == nil {
		return nil, "no version is live"
	}
	var ruledOut []string
	previousAllowed := spec == nil || spec.Previous == nil || *spec.Previous
	switch prev := live.Status.Promotion; {
	case !previousAllowed:
		ruledOut = append(ruledOut, "spec.fallback.previous is false")
	case prev == nil || prev.FromVersion == "":
		ruledOut = append(ruledOut, "no version served before it")
	default:
		switch v := version(prev.FromVersion); {
		case v == nil:
			ruledOut = append(ruledOut, fmt.Sprintf("previous version %s no longer exists", prev.FromVersion))
		case v == live:
		case v.Spec.Source == v1alpha1.SourceRuleBased:
			// The previous one was the rule-based version: judged below.
		case v.Status.Phase != v1alpha1.PhaseArchived:
			ruledOut = append(ruledOut, fmt.Sprintf("previous version %s is %s", v.Name, v.Status.Phase))
		case v.Status.Reason == v1alpha1.ReasonRolledBack:
			ruledOut = append(ruledOut, fmt.Sprintf("previous version %s was itself rolled back", v.Name))
		default:
			out = append(out, Fallback{Version: v, Kind: v1alpha1.PromotionRollback})
		}
	}
	switch name := ruleBased(spec); {
	case name == "":
		ruledOut = append(ruledOut, "no spec.fallback.ruleBasedVersion")
	default:
		switch v := version(name); {
		case v == nil:
			ruledOut = append(ruledOut, fmt.Sprintf("rule-based version %s does not exist", name))
		case v == live:
			ruledOut = append(ruledOut, "the rule-based version is what serves")
		case v.Status.Phase != v1alpha1.PhaseStandby:
			ruledOut = append(ruledOut, fmt.Sprintf("rule-based version %s is %s, not in reserve (Standby)", name, orNothing(string(v.Status.Phase))))
		default:
			out = append(out, Fallback{Version: v, Kind: v1alpha1.PromotionFallback})
		}
	}
	return out, strings.Join(ruledOut, "; ")
}

func ruleBased(spec *v1alpha1.FallbackSpec) string {
	if spec == nil {
		return ""
	}
	return spec.RuleBasedVersion
}

func orNothing(s string) string {
	if s == "" {
		return "without a phase yet"
	}
	return s
}
