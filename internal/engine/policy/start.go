package policy

import (
	"fmt"
	"time"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/schedule"
)

// The start sequence. A pass asks, in this order: a person's request, then
// the schedule, then the triggers; each later one sees a version an earlier
// one started as in flight. The controller and plumbline backtest both walk
// it with the functions below, so a backtest replays what the controller
// would do.

// ScheduleAction is what a line's schedule calls for at a moment.
type ScheduleAction string

const (
	// ScheduleIdle: nothing is due, or the schedule is suspended (starts
	// that fall while it is suspended are counted as missed when it
	// resumes, as the built-in CronJob counts them).
	ScheduleIdle ScheduleAction = ""
	// ScheduleMissed: the latest start is past the starting deadline; it
	// is recorded as acted on and nothing starts.
	ScheduleMissed ScheduleAction = "MissedSchedule"
	// ScheduleSkipped: a start is due while a version is in flight; it is
	// recorded as acted on and nothing starts.
	ScheduleSkipped ScheduleAction = "ScheduleSkipped"
	// ScheduleStart: a start is due; it goes through the checks, and is
	// recorded as acted on once they settle it (started or refused).
	ScheduleStart ScheduleAction = "Start"
)

// ScheduleStep is what the schedule calls for at now.
type ScheduleStep struct {
	Action ScheduleAction
	// At is the scheduled start the action is about: the one to record as
	// status.lastScheduleTime.
	At time.Time
	// Missed counts the starts that will never run (MissedMore: more than
	// that); with ScheduleStart, the ones before At.
	Missed     int
	MissedMore bool
	// Next is the first scheduled start after now, when the line should be
	// woken.
	Next time.Time
}

// StepSchedule is the schedule's part of the start sequence: last is the
// last start acted on (or when the schedule was first seen), inFlight says
// a version is on its way.
func StepSchedule(s *v1alpha1.ScheduleSpec, last, now time.Time, inFlight bool) (ScheduleStep, error) {
	plan, err := schedule.Compute(s.Cron, s.TimeZone, last, now, s.StartingDeadlineSeconds)
	if err != nil {
		return ScheduleStep{}, err
	}
	st := ScheduleStep{Next: plan.Next, Missed: plan.Missed, MissedMore: plan.MissedMore}
	switch {
	case s.Suspend || plan.Latest == nil:
		st.Missed, st.MissedMore = 0, false
	case plan.Due == nil:
		st.Action, st.At = ScheduleMissed, *plan.Latest
	case inFlight:
		st.Action, st.At = ScheduleSkipped, *plan.Due
	default:
		st.Action, st.At = ScheduleStart, *plan.Due
	}
	return st, nil
}

// MissedText says how many starts were missed, for a message.
func (s ScheduleStep) MissedText() string {
	if s.MissedMore {
		return fmt.Sprintf("more than %d", s.Missed)
	}
	return fmt.Sprint(s.Missed)
}

// Firing is a trigger found Firing in a pass: its name and window.
type Firing struct {
	Name   string
	Window time.Duration
}

// TriggerStep is the triggers' part of the start sequence.
type TriggerStep struct {
	// Trigger is the firing trigger that asks: the first in spec order.
	Trigger string
	// Outcome is why it may not start now (InFlight, Cooldown,
	// LiveTooRecent); empty when it may.
	Outcome string
	// Wake, for LiveTooRecent, is when the live version will have a whole
	// window of its own.
	Wake time.Time
}

// May says the trigger may go on to the checks.
func (s TriggerStep) May() bool { return s.Outcome == "" }

// StepTriggers takes the first firing trigger (spec order) and says whether
// it may start a retrain now (TriggerMayStart). ok is false when none fires.
func StepTriggers(firing []Firing, inFlight bool, lastRetrain *time.Time, cooldown time.Duration, liveSince *time.Time, now time.Time) (step TriggerStep, ok bool) {
	if len(firing) == 0 {
		return TriggerStep{}, false
	}
	f := firing[0]
	step.Trigger = f.Name
	if outcome, may := TriggerMayStart(inFlight, lastRetrain, cooldown, liveSince, f.Window, now); !may {
		step.Outcome = outcome
		if outcome == LiveTooRecent {
			step.Wake = liveSince.Add(f.Window)
		}
	}
	return step, true
}
