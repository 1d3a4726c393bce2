package policy

import (
	"testing"
	"time"

	"k8s.io/utils/ptr"

	"plumbline.dev/plumbline/api/v1alpha1"
)

func TestStepSchedule(t *testing.T) {
	day := func(d, h, m int) time.Time { return time.Date(2026, 11, d, h, m, 0, 0, time.UTC) }
	daily := func(mut func(*v1alpha1.ScheduleSpec)) *v1alpha1.ScheduleSpec {
		s := &v1alpha1.ScheduleSpec{Cron: "0 3 * * *"}
		if mut != nil {
			mut(s)
		}
		return s
	}
	withDeadline := func(s *v1alpha1.ScheduleSpec) { s.StartingDeadlineSeconds = ptr.To[int64](600) }
	suspended := func(s *v1alpha1.ScheduleSpec) { s.Suspend = true }
	cases := []struct {
		name     string
		s        *v1alpha1.ScheduleSpec
		last     time.Time
		now      time.Time
		inFlight bool
		action   ScheduleAction
		at       time.Time
		missed   int
	}{
		{"nothing due", daily(nil), day(2, 3, 0), day(2, 14, 0), false, ScheduleIdle, time.Time{}, 0},
		{"due on time", daily(nil), day(2, 3, 0), day(3, 3, 0), false, ScheduleStart, day(3, 3, 0), 0},
		{"due late, no deadline: the latest runs", daily(nil), day(2, 3, 0), day(5, 9, 0), false, ScheduleStart, day(5, 3, 0), 2},
		{"within the deadline", daily(withDeadline), day(2, 3, 0), day(3, 3, 5), false, ScheduleStart, day(3, 3, 0), 0},
		{"past the deadline: missed", daily(withDeadline), day(2, 3, 0), day(3, 4, 0), false, ScheduleMissed, day(3, 3, 0), 1},
		{"due while in flight: skipped", daily(nil), day(2, 3, 0), day(3, 3, 0), true, ScheduleSkipped, day(3, 3, 0), 0},
		{"suspended: nothing, nothing counted", daily(suspended), day(2, 3, 0), day(5, 9, 0), false, ScheduleIdle, time.Time{}, 0},
		{"suspended past the deadline: still nothing", daily(func(s *v1alpha1.ScheduleSpec) { suspended(s); withDeadline(s) }), day(2, 3, 0), day(5, 9, 0), false, ScheduleIdle, time.Time{}, 0},
	}
	for _, c := range cases {
		st, err := StepSchedule(c.s, c.last, c.now, c.inFlight)
		if err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		if st.Action != c.action || !st.At.Equal(c.at) || st.Missed != c.missed {
			t.Errorf("%s: %s at %s missed %d; want %s at %s missed %d", c.name, st.Action, st.At, st.Missed, c.action, c.at, c.missed)
		}
		if want := day(c.now.Day(), 3, 0); !st.Next.After(c.now) || st.Next.Sub(want) > 24*time.Hour {
			t.Errorf("%s: next %s after %s", c.name, st.Next, c.now)
		}
	}
	if _, err := StepSchedule(&v1alpha1.ScheduleSpec{Cron: "61 * * * *"}, day(2, 3, 0), day(3, 3, 0), false); err == nil {
		t.Error("a bad cron expression gave no error")
	}
}

func TestStepTriggers(t *testing.T) {
	now := time.Date(2026, 11, 2, 9, 0, 0, 0, time.UTC)
	ago := func(d time.Duration) *time.Time { t := now.Add(-d); return &t }
	firing := []Firing{{"auc-drop", 30 * time.Minute}, {"late-share", time.Hour}}
	if _, ok := StepTriggers(nil, false, nil, time.Hour, nil, now); ok {
		t.Error("no trigger fires, yet a step was taken")
	}
	cases := []struct {
		name        string
		inFlight    bool
		last, since *time.Time
		outcome     string
		wake        time.Time
	}{
		{"may start", false, ago(2 * time.Hour), ago(2 * time.Hour), "", time.Time{}},
		{"in flight", true, nil, nil, InFlight, time.Time{}},
		{"cooling down", false, ago(20 * time.Minute), nil, Cooldown, time.Time{}},
		{"live too recent: wakes when its window is whole", false, ago(3 * time.Hour), ago(10 * time.Minute), LiveTooRecent, now.Add(20 * time.Minute)},
	}
	for _, c := range cases {
		st, ok := StepTriggers(firing, c.inFlight, c.last, time.Hour, c.since, now)
		if !ok || st.Trigger != "auc-drop" || st.Outcome != c.outcome || !st.Wake.Equal(c.wake) || st.May() != (c.outcome == "") {
			t.Errorf("%s: %+v ok %v; want the first trigger, outcome %q, wake %s", c.name, st, ok, c.outcome, c.wake)
		}
	}
}
