// Package trigger judges whether a monitored value has held beyond a
// threshold for a whole window. The same judgement serves the line's
// triggers, the guard after a promotion and the backtest's replay.
//
// The rule: the window [now-for, now] is sampled every Step; it must hold at
// least MinPoints finite points (else Unknown: too little data is never a
// reason to act); the state is Firing when every point breaches, Pending when
// the latest does but not all, Inactive when the latest does not. A query
// that returns several series fires when any series fires (the status names
// it); it is Unknown only when no series can be judged.
package trigger

import (
	"fmt"
	"math"
	"sort"
	"time"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/promq"
)

// DefaultCoverage is the share of a window's points that must be present.
const DefaultCoverage = 0.8

// Threshold is a bound a value breaches: below or above it (strictly).
type Threshold struct {
	Below *float64
	Above *float64
}

// Breached reports whether v breaches the threshold. NaN never does.
func (t Threshold) Breached(v float64) bool {
	switch {
	case math.IsNaN(v):
		return false
	case t.Below != nil:
		return v < *t.Below
	case t.Above != nil:
		return v > *t.Above
	}
	return false
}

func (t Threshold) String() string {
	switch {
	case t.Below != nil:
		return "below " + promq.Format(*t.Below)
	case t.Above != nil:
		return "above " + promq.Format(*t.Above)
	}
	return "no threshold"
}

// Window is how long a value must hold and how it is sampled.
type Window struct {
	// For is how long the value must stay beyond the threshold.
	For time.Duration
	// Every is how often the judgement is made.
	Every time.Duration
	// Coverage is the share of the window's points that must be present;
	// zero means DefaultCoverage.
	Coverage float64
	// Delay is how long after a prediction its label is in: the window
	// judges only predictions that have their labels.
	Delay time.Duration
	// Scored says the series' points are stamped when they were scored from
	// the labels that had come in, so a point scores the predictions of
	// Delay before it; otherwise a point is stamped with the time of the
	// predictions it scores and is final Delay after it.
	Scored bool
}

// Step is the sampling interval: the evaluation period, but at least ten
// points per window, and never below a second.
func (w Window) Step() time.Duration {
	step := w.Every
	if tenth := w.For / 10; tenth < step {
		step = tenth
	}
	if step < time.Second {
		step = time.Second
	}
	return step.Truncate(time.Second)
}

// End is where the window judged at now ends: now on the step's grid
// (whole multiples of the step since the zero time). Every line judged within
// one step judges the same window, which lets lines on one query template
// share its answer; a point is at most one step old when it is judged.
//
// With a label delay on points stamped at prediction time the window ends
// Delay before now (as PromQL offset would): only final points count.
func (w Window) End(now time.Time) time.Time {
	if !w.Scored {
		now = now.Add(-w.Delay)
	}
	return now.Truncate(w.Step())
}

// Period is the time of the predictions a window ending at end judges.
func (w Window) Period(end time.Time) (from, to time.Time) {
	if w.Scored {
		end = end.Add(-w.Delay)
	}
	return end.Add(-w.For), end
}

// Reach is how far back from now the predictions a window judges go: the
// window and the label delay.
func (w Window) Reach() time.Duration { return w.For + w.Delay }

// Matured is the first time a window can judge only predictions made at or
// after t (a promotion, a rollback): a whole window after it, and the
// labels of its last predictions in.
func (w Window) Matured(t time.Time) time.Time { return t.Add(w.Reach()) }

// PeriodText says which predictions a window ending at end judges, for
// messages: "predictions of 2026-12-03 03:00 to 09:00 UTC".
func (w Window) PeriodText(end time.Time) string {
	from, to := w.Period(end)
	from, to = from.UTC(), to.UTC()
	clock := "15:04"
	if from.Second() != 0 || to.Second() != 0 {
		clock = "15:04:05"
	}
	if from.Format(time.DateOnly) == to.Format(time.DateOnly) {
		return fmt.Sprintf("predictions of %s %s to %s UTC", from.Format(time.DateOnly), from.Format(clock), to.Format(clock))
	}
	return fmt.Sprintf("predictions of %s to %s UTC", from.Format(time.DateOnly+" "+clock), to.Format(time.DateOnly+" "+clock))
}

// Expected is the number of points in a full window.
func (w Window) Expected() int { return int(w.For/w.Step()) + 1 }

// MinPoints is the least number of points a series needs to be judged.
func (w Window) MinPoints() int {
	c := w.Coverage
	if c <= 0 || c > 1 {
		c = DefaultCoverage
	}
	return max(2, int(math.Ceil(c*float64(w.Expected()))))
}

// Result is a trigger's state with what decided it.
type Result struct {
	State v1alpha1.TriggerState
	// Value is the latest value of the deciding series; NaN when none.
	Value float64
	// Series names the deciding series when the query returned several.
	Series string
	// Since is, for Pending and Firing, when the run of breaching points
	// began.
	Since time.Time
	// Message says what was seen.
	Message string
}

// Unknown is the result of a question that could not be asked.
func Unknown(err error) Result {
	return Result{State: v1alpha1.TriggerUnknown, Value: math.NaN(), Message: err.Error()}
}

// Judge decides a state from a range query's result at now (the window's
// end). With a label delay the message begins with the predictions the
// window judged.
func Judge(series []promq.Series, th Threshold, w Window, now time.Time) Result {
	r := judge(series, th, w, now)
	if w.Delay > 0 {
		r.Message = w.PeriodText(now) + ": " + r.Message
	}
	return r
}

func judge(series []promq.Series, th Threshold, w Window, now time.Time) Result {
	if len(series) == 0 {
		return Result{State: v1alpha1.TriggerUnknown, Value: math.NaN(), Message: "the query returned no series"}
	}
	results := make([]Result, len(series))
	for i, s := range series {
		results[i] = judgeOne(s, th, w, now)
		results[i].Series = s.Labels
	}
	count := map[v1alpha1.TriggerState]int{}
	for _, r := range results {
		count[r.State]++
	}
	for _, state := range []v1alpha1.TriggerState{v1alpha1.TriggerFiring, v1alpha1.TriggerPending, v1alpha1.TriggerInactive, v1alpha1.TriggerUnknown} {
		if count[state] == 0 {
			continue
		}
		// The first series in that state, by labels, decides; the message
		// says how many others are alike.
		sort.SliceStable(results, func(i, j int) bool { return results[i].Series < results[j].Series })
		for _, r := range results {
			if r.State != state {
				continue
			}
			if len(series) > 1 {
				r.Message = fmt.Sprintf("%s: %s (%d of %d series %s)", r.Series, r.Message, count[state], len(series), state)
			} else {
				r.Series = ""
			}
			return r
		}
	}
	return Result{State: v1alpha1.TriggerUnknown, Value: math.NaN(), Message: "no series could be judged"}
}

func judgeOne(s promq.Series, th Threshold, w Window, now time.Time) Result {
	start := now.Add(-w.For)
	var pts []promq.Point
	for _, p := range s.Points {
		if !p.T.Before(start) && !p.T.After(now) && !math.IsNaN(p.V) {
			pts = append(pts, p)
		}
	}
	if len(pts) < w.MinPoints() {
		v := math.NaN()
		if len(pts) > 0 {
			v = pts[len(pts)-1].V
		}
		return Result{State: v1alpha1.TriggerUnknown, Value: v,
			Message: fmt.Sprintf("only %d of the window's %d points are there (%d needed)", len(pts), w.Expected(), w.MinPoints())}
	}
	last := pts[len(pts)-1]
	if !th.Breached(last.V) {
		return Result{State: v1alpha1.TriggerInactive, Value: last.V,
			Message: fmt.Sprintf("latest value %s is not %s", promq.Format(last.V), th)}
	}
	run := len(pts) - 1
	for run > 0 && th.Breached(pts[run-1].V) {
		run--
	}
	if run == 0 {
		return Result{State: v1alpha1.TriggerFiring, Value: last.V, Since: pts[0].T,
			Message: fmt.Sprintf("%s at all %d points over %s (latest %s)", th, len(pts), w.For, promq.Format(last.V))}
	}
	return Result{State: v1alpha1.TriggerPending, Value: last.V, Since: pts[run].T,
		Message: fmt.Sprintf("%s since %s (%d of %d points), not yet for %s (latest %s)", th, pts[run].T.UTC().Format(time.RFC3339), len(pts)-run, len(pts), w.For, promq.Format(last.V))}
}
