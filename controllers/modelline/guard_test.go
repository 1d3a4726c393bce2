package modelline

import (
	"strings"
	"testing"
	"time"

	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/utils/ptr"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/trigger"
)

// guardFixture: v1 live since 06:00 (replacing v0, archived), rules in
// reserve, a guard with two hours of probation.
func guardFixture() (*v1alpha1.ModelLine, *view, *v1alpha1.ModelVersion, *v1alpha1.ModelVersion, *v1alpha1.ModelVersion) {
	at := func(h, m int) *metav1.Time {
		t := metav1.NewTime(time.Date(2026, 11, 2, h, m, 0, 0, time.UTC))
		return &t
	}
	line := &v1alpha1.ModelLine{}
	line.Spec.Guard = &v1alpha1.GuardSpec{ForSeconds: 600, EverySeconds: 60, ProbationSeconds: 7200}
	line.Spec.Fallback = &v1alpha1.FallbackSpec{RuleBasedVersion: "rules"}
	v0 := version("v0", 0, v1alpha1.PhaseArchived, v1alpha1.SourceImported)
	v1 := version("v1", 1, v1alpha1.PhaseLive, v1alpha1.SourceTrained)
	v1.Status.PromotedTime = at(6, 0)
	v1.Status.Promotion = &v1alpha1.PromotionStatus{FromVersion: "v0", Sequence: 2, StartedTime: at(5, 55)}
	rules := version("rules", 0, v1alpha1.PhaseStandby, v1alpha1.SourceRuleBased)
	return line, &view{versions: []*v1alpha1.ModelVersion{rules, v0, v1}}, v0, v1, rules
}

var firing = trigger.Result{State: v1alpha1.TriggerFiring, Value: 0.7, Message: "below 0.76 at all 11 points"}

func TestDecideGuard(t *testing.T) {
	in := time.Date(2026, 11, 2, 6, 30, 0, 0, time.UTC)
	late := time.Date(2026, 11, 2, 8, 30, 0, 0, time.UTC)
	cases := []struct {
		name     string
		mutate   func(*v1alpha1.ModelLine, *view, *v1alpha1.ModelVersion, *v1alpha1.ModelVersion, *v1alpha1.ModelVersion)
		res      trigger.Result
		now      time.Time
		degraded metav1.ConditionStatus
		reason   string
		target   string
		kind     v1alpha1.PromotionKind
		review   bool
	}{
		{"healthy", nil, trigger.Result{State: v1alpha1.TriggerInactive, Value: 0.82}, in, metav1.ConditionFalse, reasonGuardHealthy, "", "", false},
		{"a dip", nil, trigger.Result{State: v1alpha1.TriggerPending, Value: 0.7}, in, metav1.ConditionFalse, reasonGuardHealthy, "", "", false},
		{"unknown never acts", nil, trigger.Result{State: v1alpha1.TriggerUnknown, Message: "query failed"}, in, metav1.ConditionUnknown, reasonGuardUnknown, "", "", false},
		{"regression in probation: previous", nil, firing, in, metav1.ConditionTrue, reasonRegressed, "v0", v1alpha1.PromotionRollback, false},
		{"after probation: degrade only", nil, firing, late, metav1.ConditionTrue, reasonRegressedLate, "", "", false},
		{"previous rolled back: rule-based", func(_ *v1alpha1.ModelLine, _ *view, v0, _, _ *v1alpha1.ModelVersion) {
			v0.Status.Reason = v1alpha1.ReasonRolledBack
		}, firing, in, metav1.ConditionTrue, reasonSwitchingFallback, "rules", v1alpha1.PromotionFallback, false},
		{"previous failed: rule-based", func(_ *v1alpha1.ModelLine, _ *view, v0, _, _ *v1alpha1.ModelVersion) {
			v0.Status.Phase = v1alpha1.PhaseFailed
		}, firing, in, metav1.ConditionTrue, reasonSwitchingFallback, "rules", v1alpha1.PromotionFallback, false},
		{"previous not allowed: rule-based", func(l *v1alpha1.ModelLine, _ *view, _, _, _ *v1alpha1.ModelVersion) {
			l.Spec.Fallback.Previous = ptr.To(false)
		}, firing, in, metav1.ConditionTrue, reasonSwitchingFallback, "rules", v1alpha1.PromotionFallback, false},
		{"no previous, no rule-based", func(l *v1alpha1.ModelLine, _ *view, _, v1, _ *v1alpha1.ModelVersion) {
			v1.Status.Promotion.FromVersion = ""
			l.Spec.Fallback = nil
		}, firing, in, metav1.ConditionTrue, reasonNoFallback, "", "", true},
		{"the fallback itself regresses", func(l *v1alpha1.ModelLine, vw *view, v0, v1, rules *v1alpha1.ModelVersion) {
			v1.Status.Phase = v1alpha1.PhaseArchived
			v1.Status.Reason = v1alpha1.ReasonRolledBack
			rules.Status.Phase = v1alpha1.PhaseLive
			rules.Status.PromotedTime = v1.Status.PromotedTime
			rules.Status.Promotion = &v1alpha1.PromotionStatus{Kind: v1alpha1.PromotionFallback, FromVersion: "v1", Sequence: 3, StartedTime: v1.Status.PromotedTime}
		}, firing, in, metav1.ConditionTrue, reasonRollbackLimit, "", "", true},
		{"rule-based not in reserve (its own rollout failed)", func(_ *v1alpha1.ModelLine, _ *view, v0, _, rules *v1alpha1.ModelVersion) {
			v0.Status.Reason = v1alpha1.ReasonRolledBack
			rules.Status.Phase = v1alpha1.PhaseFailed
		}, firing, in, metav1.ConditionTrue, reasonNoFallback, "", "", true},
		{"Manual: the rollback to a version that served before is allowed", func(l *v1alpha1.ModelLine, _ *view, _, _, _ *v1alpha1.ModelVersion) {
			l.Spec.Gate.Approval = v1alpha1.ApprovalManual
		}, firing, in, metav1.ConditionTrue, reasonRegressed, "v0", v1alpha1.PromotionRollback, false},
		{"Manual: the rule-based fallback waits for a person", func(l *v1alpha1.ModelLine, _ *view, _, _, _ *v1alpha1.ModelVersion) {
			l.Spec.Gate.Approval = v1alpha1.ApprovalManual
			l.Spec.Fallback.Previous = ptr.To(false)
		}, firing, in, metav1.ConditionTrue, reasonSwitchNeedsPerson, "", "", true},
		{"Manual allowing the rule-based fallback", func(l *v1alpha1.ModelLine, _ *view, _, _, _ *v1alpha1.ModelVersion) {
			l.Spec.Gate.Approval = v1alpha1.ApprovalManual
			l.Spec.Gate.WithoutApproval = &v1alpha1.UnattendedSwitches{RuleBasedFallback: ptr.To(true)}
			l.Spec.Fallback.Previous = ptr.To(false)
		}, firing, in, metav1.ConditionTrue, reasonSwitchingFallback, "rules", v1alpha1.PromotionFallback, false},
		{"rollback switched off: the rule-based fallback", func(l *v1alpha1.ModelLine, _ *view, _, _, _ *v1alpha1.ModelVersion) {
			l.Spec.Gate.WithoutApproval = &v1alpha1.UnattendedSwitches{Rollback: ptr.To(false)}
		}, firing, in, metav1.ConditionTrue, reasonSwitchingFallback, "rules", v1alpha1.PromotionFallback, false},
		{"Manual, rollback switched off: a person", func(l *v1alpha1.ModelLine, _ *view, _, _, _ *v1alpha1.ModelVersion) {
			l.Spec.Gate.Approval = v1alpha1.ApprovalManual
			l.Spec.Gate.WithoutApproval = &v1alpha1.UnattendedSwitches{Rollback: ptr.To(false)}
		}, firing, in, metav1.ConditionTrue, reasonSwitchNeedsPerson, "", "", true},
		{"a rollout in progress", func(_ *v1alpha1.ModelLine, vw *view, _, _, _ *v1alpha1.ModelVersion) {
			vw.versions = append(vw.versions, version("v2", 2, v1alpha1.PhasePromoting, v1alpha1.SourceTrained))
		}, firing, in, metav1.ConditionTrue, reasonRollbackWaits, "", "", false},
	}
	for _, c := range cases {
		line, vw, v0, v1, rules := guardFixture()
		if c.mutate != nil {
			c.mutate(line, vw, v0, v1, rules)
		}
		v := decideGuard(line, vw, c.res, c.now)
		target := ""
		if v.target != nil {
			target = v.target.Name
		}
		if v.degraded != c.degraded || v.reason != c.reason || target != c.target || v.kind != c.kind || v.review != c.review {
			t.Errorf("%s: got %s/%s target %q %s review %v (%s)", c.name, v.degraded, v.reason, target, v.kind, v.review, v.message)
		}
		if c.target != "" && !strings.Contains(v.message, "switching to "+c.target) {
			t.Errorf("%s: message %q", c.name, v.message)
		}
		if c.reason == reasonSwitchNeedsPerson {
			for _, want := range []string{"spec.gate.withoutApproval", "kubectl plumbline rollback", "--to "} {
				if !strings.Contains(v.message, want) {
					t.Errorf("%s: message %q lacks %q", c.name, v.message, want)
				}
			}
		}
	}
}

func TestFallbackCondition(t *testing.T) {
	line, vw, _, v1, rules := guardFixture()
	_ = line
	if c := fallbackCondition(vw); c.Status != metav1.ConditionFalse || c.Reason != "ServingCandidate" {
		t.Errorf("candidate live: %+v", c)
	}
	v1.Status.Promotion.Kind = v1alpha1.PromotionRollback
	if c := fallbackCondition(vw); c.Status != metav1.ConditionTrue || c.Reason != v1alpha1.ReasonRolledBack || !strings.Contains(c.Message, "in place of v0") {
		t.Errorf("rolled back: %+v", c)
	}
	v1.Status.Phase = v1alpha1.PhaseArchived
	rules.Status.Phase = v1alpha1.PhaseLive
	rules.Status.Promotion = &v1alpha1.PromotionStatus{Kind: v1alpha1.PromotionFallback, FromVersion: "v1", Sequence: 3}
	if c := fallbackCondition(vw); c.Status != metav1.ConditionTrue || c.Reason != "RuleBasedFallback" {
		t.Errorf("rule-based: %+v", c)
	}
}

func TestLiveIsTheLatestPromotion(t *testing.T) {
	_, vw, v0, v1, _ := guardFixture()
	// A person's rollback to v0 at the very same moment: the sequence, not
	// the clock, says which is live.
	v0.Status.Phase = v1alpha1.PhaseLive
	v0.Status.PromotedTime = v1.Status.PromotedTime
	v0.Status.Promotion = &v1alpha1.PromotionStatus{Kind: v1alpha1.PromotionRequested, FromVersion: "v1", Sequence: vw.nextSequence()}
	if got := vw.live(); got != v0 {
		t.Errorf("live %s, want v0 (promoted last)", got.Name)
	}
}
