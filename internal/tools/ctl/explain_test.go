package ctl

import (
	"bytes"
	"strings"
	"testing"
	"time"

	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/utils/ptr"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// explainFixture: late-risk-v3 live since 06:00 in place of v2, a guard with
// four hours of probation, a weekly schedule, the auc-drop trigger (a
// one-hour window) and a twelve-hour cooldown; it is 09:00.
func explainFixture() (*v1alpha1.ModelLine, []v1alpha1.ModelVersion, time.Time) {
	at := func(h, m int) *metav1.Time {
		t := metav1.NewTime(time.Date(2026, 11, 2, h, m, 0, 0, time.UTC))
		return &t
	}
	l := &v1alpha1.ModelLine{ObjectMeta: metav1.ObjectMeta{Name: "late-risk", Namespace: "larkspur"}}
	l.Spec.Schedule = &v1alpha1.ScheduleSpec{Cron: "30 2 * * 1", TimeZone: "Europe/London"}
	l.Spec.Triggers = []v1alpha1.TriggerSpec{{Name: "auc-drop", Below: ptr.To(0.78), ForSeconds: 3600, EverySeconds: 60}}
	l.Spec.Guard = &v1alpha1.GuardSpec{ProbationSeconds: 14400}
	l.Spec.CooldownSeconds = ptr.To[int32](43200)
	l.Status = v1alpha1.ModelLineStatus{
		LiveVersion: "late-risk-v3", PreviousVersion: "late-risk-v2",
		LastRetrainTime: at(1, 0), LastPromotionTime: at(6, 0), NextScheduleTime: at(0, 0),
		Triggers: []v1alpha1.TriggerStatus{{Name: "auc-drop", State: v1alpha1.TriggerFiring, Since: at(8, 0), Value: "0.72", Message: "below 0.78 at all 61 points"}},
		Guard:    &v1alpha1.TriggerStatus{Name: "late-risk-v3", State: v1alpha1.TriggerInactive, Message: "0.81, above 0.76"},
		Conditions: []metav1.Condition{
			{Type: v1alpha1.ConditionReady, Status: metav1.ConditionTrue, Reason: v1alpha1.ReasonServing, Message: "late-risk-v3 serves, and nothing waits for a person"},
			{Type: v1alpha1.ConditionActionRequired, Status: metav1.ConditionFalse, Reason: v1alpha1.ReasonNothingRequired},
		},
	}
	l.Status.NextScheduleTime = &metav1.Time{Time: time.Date(2026, 11, 9, 2, 30, 0, 0, time.UTC)}
	v3 := v1alpha1.ModelVersion{ObjectMeta: metav1.ObjectMeta{Name: "late-risk-v3"}, Spec: v1alpha1.ModelVersionSpec{Line: "late-risk", Source: v1alpha1.SourceTrained},
		Status: v1alpha1.ModelVersionStatus{Phase: v1alpha1.PhaseLive, PromotedTime: at(6, 0)}}
	return l, []v1alpha1.ModelVersion{v3}, time.Date(2026, 11, 2, 9, 0, 0, 0, time.UTC)
}

func TestExplain(t *testing.T) {
	cases := []struct {
		name   string
		mutate func(*v1alpha1.ModelLine, *[]v1alpha1.ModelVersion)
		want   []string
	}{
		{"a firing trigger held by the cooldown", nil, []string{
			"late-risk-v3 serves (Trained, live since 2026-11-02T06:00:00Z (3h ago), in place of late-risk-v2).",
			"Ready is True (Serving)",
			`The schedule "30 2 * * 1" (Europe/London): next start at 2026-11-09T02:30:00Z (in 6d17h).`,
			"Trigger auc-drop is Firing since 2026-11-02T08:00:00Z (60m ago) (value 0.72): below 0.78 at all 61 points",
			"Trigger auc-drop asks for a retrain, but the line cools down: the last retrain started at 2026-11-02T01:00:00Z, and a trigger may start the next one 12h0m0s later, at 2026-11-02T13:00:00Z (in 4h).",
			"The guard may roll late-risk-v3 back until its probation ends at 2026-11-02T10:00:00Z (in 60m).",
			"Nothing is needed. To retrain now: kubectl plumbline retrain late-risk -n larkspur.",
		}},
		{"a version in flight", func(l *v1alpha1.ModelLine, vs *[]v1alpha1.ModelVersion) {
			l.Status.ActiveVersion = "late-risk-v4"
			*vs = append(*vs, v1alpha1.ModelVersion{ObjectMeta: metav1.ObjectMeta{Name: "late-risk-v4"}, Spec: v1alpha1.ModelVersionSpec{Line: "late-risk"},
				Status: v1alpha1.ModelVersionStatus{Phase: v1alpha1.PhaseTraining, Message: "training Job late-risk-v4-train runs"}})
		}, []string{
			"Trigger auc-drop asks for a retrain, but late-risk-v4 is in flight",
			"late-risk-v4 is Training: training Job late-risk-v4-train runs",
		}},
		{"a live version too recent to judge", func(l *v1alpha1.ModelLine, _ *[]v1alpha1.ModelVersion) {
			l.Spec.CooldownSeconds = ptr.To[int32](0)
			l.Status.LastPromotionTime = &metav1.Time{Time: time.Date(2026, 11, 2, 8, 30, 0, 0, time.UTC)}
		}, []string{"but the live version went live at 2026-11-02T08:30:00Z: its window must lie wholly after that, with the labels of its predictions in, at 2026-11-02T09:30:00Z (in 30m)"}},
		{"a live version whose labels are not in yet", func(l *v1alpha1.ModelLine, _ *[]v1alpha1.ModelVersion) {
			l.Spec.CooldownSeconds = ptr.To[int32](0)
			l.Spec.Labels = &v1alpha1.LabelsSpec{DelaySeconds: ptr.To[int32](7200)}
			l.Status.LastPromotionTime = &metav1.Time{Time: time.Date(2026, 11, 2, 7, 0, 0, 0, time.UTC)}
		}, []string{"but the live version went live at 2026-11-02T07:00:00Z: its window must lie wholly after that, with the labels of its predictions in, at 2026-11-02T10:00:00Z (in 60m)",
			"The guard may roll late-risk-v3 back until its probation ends at 2026-11-02T12:00:00Z (in 3h)"}}, // promoted at 08:00: two hours of labels, then two of probation
		{"inputs drifted, quality not known yet", func(l *v1alpha1.ModelLine, _ *[]v1alpha1.ModelVersion) {
			l.Spec.Checks = &v1alpha1.ChecksSpec{EarlyWarning: &v1alpha1.EarlyWarningSpec{EverySeconds: 300}}
			l.Status.Conditions = append(l.Status.Conditions, metav1.Condition{Type: v1alpha1.ConditionInputsDrifted, Status: metav1.ConditionTrue,
				Reason: "InputsMoved", Message: "the inputs moved (depot-shift): drift check depot-shift is 0.4; nothing is started by this alone"})
		}, []string{"The early warning: InputsDrifted=True (InputsMoved), it reports only: the inputs moved (depot-shift)"}},
		{"nothing fires, nothing holds", func(l *v1alpha1.ModelLine, _ *[]v1alpha1.ModelVersion) {
			l.Status.Triggers[0].State = v1alpha1.TriggerInactive
		}, []string{"Nothing: no trigger fires, and no check refused a start."}},
		{"the checks refused, and a person must act", func(l *v1alpha1.ModelLine, _ *[]v1alpha1.ModelVersion) {
			l.Spec.CooldownSeconds = ptr.To[int32](0)
			l.Status.Conditions = append(l.Status.Conditions,
				metav1.Condition{Type: v1alpha1.ConditionBlocked, Status: metav1.ConditionTrue, Reason: "DataQualityIssue", Message: "retrain for Trigger/auc-drop: address-missing 0.3 above 0.05"})
			l.Status.Conditions[1] = metav1.Condition{Type: v1alpha1.ConditionActionRequired, Status: metav1.ConditionTrue, Reason: "Blocked",
				Message: "Blocked (DataQualityIssue): address-missing 0.3 above 0.05; NeedsReview (NoFallback): nothing to fall back to"}
		}, []string{
			"Trigger auc-drop asks for a retrain and nothing in the sequence holds it back: the checks run next.",
			"The checks (Blocked=True, DataQualityIssue): retrain for Trigger/auc-drop: address-missing 0.3 above 0.05",
			"  - Blocked (DataQualityIssue): address-missing 0.3 above 0.05\n  - NeedsReview (NoFallback): nothing to fall back to",
		}},
	}
	for _, c := range cases {
		l, vs, now := explainFixture()
		if c.mutate != nil {
			c.mutate(l, &vs)
		}
		var b bytes.Buffer
		explain(&b, l, vs, now)
		for _, want := range c.want {
			if !strings.Contains(b.String(), want) {
				t.Errorf("%s: explanation lacks %q:\n%s", c.name, want, b.String())
			}
		}
	}
}
