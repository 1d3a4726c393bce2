// Package schedule works out when a line's cron schedule is due, handling
// missed starts the way the built-in CronJob controller does: of all the
// starts missed since the last one acted on, only the most recent runs, and
// not when it is later than the starting deadline allows.
package schedule

import (
	"fmt"
	"time"

	"plumbline.dev/plumbline/internal/engine/speccheck"
)

// maxWalk bounds the starts counted since the last one (a minutely schedule
// after a long outage); beyond it the count is reported as "more than".
const maxWalk = 1000

// Plan is what a schedule asks for at a moment.
type Plan struct {
	// Due is the start to act on now; nil when none is due.
	Due *time.Time
	// Missed counts the starts since the last one acted on that will never
	// run: all but the most recent, or all of them when the most recent is
	// past the deadline. MissedMore says the count stopped at its bound.
	Missed     int
	MissedMore bool
	// Latest is the most recent start at or before now since the last one
	// acted on (nil when there was none); when Due is nil but Latest is
	// set, Latest was past the starting deadline.
	Latest *time.Time
	// Next is the first start after now.
	Next time.Time
}

// Compute plans a schedule. last is the last start acted on, or when the
// line was created; deadline, when set, is how late a start may still run.
func Compute(expr, zone string, last, now time.Time, deadline *int64) (Plan, error) {
	sched, err := speccheck.CronParser.Parse(expr)
	if err != nil {
		return Plan{}, fmt.Errorf("spec.schedule.cron: %w", err)
	}
	loc, err := speccheck.Location(zone)
	if err != nil {
		return Plan{}, fmt.Errorf("spec.schedule.timeZone: %w", err)
	}
	p := Plan{Next: sched.Next(now.In(loc)).UTC()}
	var starts int
	var latest time.Time
	for t := sched.Next(last.In(loc)); !t.After(now); t = sched.Next(t) {
		latest = t
		starts++
		if starts >= maxWalk {
			// Jump to the last start before now: only the most recent
			// one can run anyway.
			p.MissedMore = true
			for u := sched.Next(now.Add(-48 * time.Hour).In(loc)); !u.After(now); u = sched.Next(u) {
				latest = u
			}
			break
		}
	}
	if starts == 0 {
		return p, nil
	}
	l := latest.UTC()
	p.Latest = &l
	if deadline != nil && l.Add(time.Duration(*deadline)*time.Second).Before(now) {
		p.Missed = starts
		return p, nil
	}
	p.Due = &l
	p.Missed = starts - 1
	return p, nil
}
