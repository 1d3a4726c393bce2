package backtest

import (
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
	"time"

	"k8s.io/utils/ptr"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/promq"
)

var t0 = time.Date(2026, 9, 7, 0, 0, 0, 0, time.UTC) // a Monday

func near(t *testing.T, what string, got, want, tol float64) {
	t.Helper()
	if math.Abs(got-want) > tol {
		t.Errorf("%s = %v, want %v (within %v)", what, got, want, tol)
	}
}

// series makes a history of one point a minute for the given duration.
func series(d time.Duration, f func(t time.Time) float64) *History {
	h := &History{Source: "synthetic"}
	for t := t0; t.Before(t0.Add(d)); t = t.Add(time.Minute) {
		h.Points = append(h.Points, promq.Point{T: t, V: f(t)})
	}
	return h
}

// stepDrop is a history of span at 0.85 that drops to 0.74 at drop.
func stepDrop(span time.Duration, drop time.Time) *History {
	return series(span, func(t time.Time) float64 {
		if t.Before(drop) {
			return 0.85
		}
		return 0.74
	})
}

func below(v float64) *float64 { return &v }

func triggerPolicy(name string, th float64, forD, every time.Duration) Policy {
	return Policy{Name: name, Triggers: []v1alpha1.TriggerSpec{{Name: "auc-drop", Below: below(th),
		ForSeconds: int32(forD.Seconds()), EverySeconds: int32(every.Seconds())}}}
}

func opts(target float64) Options {
	o := DefaultOptions()
	o.Target = target
	return o
}

// A step drop is detected exactly one window after it happens: the first
// evaluation whose whole window lies after the drop fires, and the retrain
// starts then.
func TestStepDropDetectedOneWindowLater(t *testing.T) {
	drop := t0.Add(2*24*time.Hour + 3*time.Hour)
	h := stepDrop(5*24*time.Hour, drop)
	for _, w := range []time.Duration{30 * time.Minute, time.Hour, 6 * time.Hour} {
		p := triggerPolicy("trigger", 0.78, w, 5*time.Minute)
		res, err := Replay(h, p, opts(0.78), 0.85)
		if err != nil {
			t.Fatal(err)
		}
		if len(res.Retrains) == 0 || !res.Retrains[0].Start.Equal(drop.Add(w)) {
			t.Fatalf("window %s: retrains %+v, want the first at %s", w, res.Retrains, drop.Add(w))
		}
		if len(res.Episodes) != 1 || *res.Episodes[0].DelaySeconds != w.Seconds() {
			t.Errorf("window %s: episodes %+v, want one detected %s after it began", w, res.Episodes, w)
		}
		// The retrain restores 0.85 three hours after it starts, for good.
		wantBelow := (w + 3*time.Hour).Seconds()
		near(t, "time below target", res.BelowSeconds, wantBelow, 1)
		if len(res.Retrains) != 1 {
			t.Errorf("window %s: %d retrains, want 1", w, len(res.Retrains))
		}
	}
}

// With no policy, time below target is everything after the drop.
func TestNoneIsTheHistory(t *testing.T) {
	drop := t0.Add(24 * time.Hour)
	h := stepDrop(3*24*time.Hour, drop)
	res, err := Replay(h, Policy{Name: "none"}, opts(0.78), 0.85)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "below", res.BelowSeconds, (48 * time.Hour).Seconds(), 1)
	if res.Missed != 1 || len(res.Retrains) != 0 {
		t.Errorf("missed %d retrains %d", res.Missed, len(res.Retrains))
	}
}

// A weekly schedule over four weeks starts four retrains, on Mondays at
// 02:30 London time (01:30 UTC in September), each restoring the level.
func TestScheduleReplaysTheControllersPlan(t *testing.T) {
	h := series(28*24*time.Hour, func(t time.Time) float64 {
		// Decays 0.01 a day from 0.86: below 0.80 after six days.
		return 0.86 - 0.01*t.Sub(t0).Hours()/24
	})
	p := Policy{Name: "weekly", Schedule: &v1alpha1.ScheduleSpec{Cron: "30 2 * * 1", TimeZone: "Europe/London"}}
	res, err := Replay(h, p, opts(0.80), 0.86)
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Retrains) != 4 {
		t.Fatalf("%d retrains, want 4: %+v", len(res.Retrains), res.Retrains)
	}
	for i, r := range res.Retrains {
		want := t0.Add(time.Duration(i)*7*24*time.Hour + time.Hour + 30*time.Minute)
		if !r.Start.Equal(want) || r.Reason != "Schedule" {
			t.Errorf("retrain %d at %s (%s), want %s", i, r.Start, r.Reason, want)
		}
	}
	// Each retrain serves three hours after its start (04:30 UTC) at 0.86
	// against the history's mean over the hour before, which stands half
	// an hour of decay back; it then decays 0.01 a day, below 0.80 from
	// 6 days less half an hour on, until the next one serves a week after:
	// 24.5 h below in each of the first three weeks, and from day 27 04:00
	// to the end in the last: 93.5 h in all.
	near(t, "hours below target", res.BelowSeconds/3600, 93.5, 0.25)
	near(t, "per month", res.RetrainsPerMonth, 4/(28.0/30), 0.01)
}

// The schedule is replayed as the controller runs it: woken at each
// scheduled start, so a short starting deadline is met whatever the
// history's own grid; and a suspended schedule does nothing, no start and
// no missed start counted while it is suspended (the controller counts them
// when the schedule resumes).
func TestScheduleReplayMatchesTheController(t *testing.T) {
	// A history on a grid half a minute off the schedule's.
	h := &History{Source: "synthetic"}
	for ts := t0.Add(30 * time.Second); ts.Before(t0.Add(14 * 24 * time.Hour)); ts = ts.Add(time.Minute) {
		h.Points = append(h.Points, promq.Point{T: ts, V: 0.85})
	}
	deadline := ptr.To[int64](10)
	p := Policy{Name: "daily", Schedule: &v1alpha1.ScheduleSpec{Cron: "0 3 * * *", StartingDeadlineSeconds: deadline}}
	res, err := Replay(h, p, opts(0.80), 0.85)
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Retrains) != 14 || res.Decisions["MissedSchedule"] != 0 {
		t.Errorf("a daily schedule with a 10 s deadline over 14 days: %d retrains, decisions %v; want 14 started on time", len(res.Retrains), res.Decisions)
	}
	for i, r := range res.Retrains {
		if want := t0.Add(time.Duration(i)*24*time.Hour + 3*time.Hour); !r.Start.Equal(want) {
			t.Errorf("retrain %d at %s, want %s", i, r.Start, want)
		}
	}

	p.Schedule.Suspend = true
	for _, d := range []*int64{nil, deadline} {
		p.Schedule.StartingDeadlineSeconds = d
		res, err := Replay(h, p, opts(0.80), 0.85)
		if err != nil {
			t.Fatal(err)
		}
		if len(res.Retrains) != 0 || len(res.Decisions) != 0 {
			t.Errorf("deadline %v: a suspended schedule started %d retrains and decided %v; want nothing", d, len(res.Retrains), res.Decisions)
		}
	}
}

// The cooldown and a version in flight hold a firing trigger back, as in
// the controller; fresh data too few refuses the start.
func TestGatesAndFreshData(t *testing.T) {
	drop := t0.Add(12 * time.Hour)
	// A drop no retrain cures: each retrain takes effect, but the level it
	// restores is below target too.
	h := series(4*24*time.Hour, func(t time.Time) float64 {
		if t.Before(drop) {
			return 0.85
		}
		return 0.70
	})
	p := triggerPolicy("trigger", 0.78, time.Hour, 5*time.Minute)
	cooldown := int32(24 * 3600)
	p.CooldownSeconds = &cooldown
	res, err := Replay(h, p, opts(0.78), 0.75)
	if err != nil {
		t.Fatal(err)
	}
	// Starts at 13:00, then once a day after: 13:00 on days 1, 2, 3.
	if len(res.Retrains) != 4 {
		t.Errorf("%d retrains, want 4 (one a day under a 24 h cooldown): %+v", len(res.Retrains), res.Retrains)
	}
	if res.Decisions["InFlight"] == 0 || res.Decisions["Cooldown"] == 0 {
		t.Errorf("decisions %v, want some InFlight and Cooldown", res.Decisions)
	}
	// Labelled rows: 1,000 an hour; at least 30,000 since the last start
	// means a start every 30 hours at the most.
	h.Labelled = make([]float64, len(h.Points))
	for i, pt := range h.Points {
		h.Labelled[i] = 1000 * pt.T.Sub(t0).Hours()
	}
	at := 30000.0
	p.FreshDataAtLeast = &at
	res, err = Replay(h, p, opts(0.78), 0.75)
	if err != nil {
		t.Fatal(err)
	}
	if res.Decisions["InsufficientData"] == 0 {
		t.Errorf("decisions %v, want InsufficientData refusals", res.Decisions)
	}
	for i := 1; i < len(res.Retrains); i++ {
		if gap := res.Retrains[i].Start.Sub(res.Retrains[i-1].Start); gap < 30*time.Hour {
			t.Errorf("retrains %d and %d only %s apart with 30,000 rows needed at 1,000 an hour", i-1, i, gap)
		}
	}
}

// Source: Montgomery and Runger, Applied Statistics and Probability for
// Engineers, 3rd ed., Example 16-6: target 99, K=1, H=10.
func TestCUSUMReference(t *testing.T) {
	x := []float64{102.0, 94.8, 98.3, 98.4, 102.0, 98.5, 99.0, 97.7, 100.0, 98.1, 101.3, 98.7, 101.1, 98.4, 97.0, 96.7, 100.3, 101.4, 97.2, 101.0}
	upper := []float64{2, 0, 0, 0, 2, .5, 0, 0, 0, 0, 1.3, 0, 1.1, 0, 0, 0, .3, 1.7, 0, 1.0}
	lower := []float64{0, 3.2, 2.9, 2.5, 0, 0, 0, .3, 0, 0, 0, 0, 0, 0, 1.0, 2.3, 0, 0, .8, 0}
	c := CUSUM{Target: 99, K: 1, H: 10}
	for i, v := range x {
		up, down := c.Add(v)
		near(t, "upper sum", c.Upper, upper[i], 1e-9)
		near(t, "lower sum", c.Lower, lower[i], 1e-9)
		if up || down {
			t.Errorf("observation %d: an alarm; the example has none", i+1)
		}
	}
}

// A CUSUM policy catches a small sustained drop a threshold trigger never
// sees, and leaves a stable series alone.
func TestCUSUMPolicy(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	drop := t0.Add(48 * time.Hour)
	h := series(5*24*time.Hour, func(t time.Time) float64 {
		v := 0.84 + 0.004*rng.NormFloat64()
		if !t.Before(drop) {
			v -= 0.015
		}
		return v
	})
	p := Policy{Name: "cusum", CUSUM: &CUSUMRule{K: 0.005, H: 0.1}}
	res, err := Replay(h, p, opts(0.83), 0.84)
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Retrains) == 0 || res.Retrains[0].Start.Before(drop) || res.Retrains[0].Start.After(drop.Add(2*time.Hour)) {
		t.Fatalf("retrains %+v, want the first within two hours of the drop at %s", res.Retrains, drop)
	}
	if res.Retrains[0].Reason != "CUSUM" {
		t.Errorf("reason %q", res.Retrains[0].Reason)
	}
	trig := triggerPolicy("trigger", 0.78, time.Hour, 5*time.Minute)
	if tr, _ := Replay(h, trig, opts(0.83), 0.84); len(tr.Retrains) != 0 {
		t.Errorf("a trigger at 0.78 started %d retrains on a drop to 0.825", len(tr.Retrains))
	}
	// Better as it is, the CUSUM is never recommended: the controller
	// cannot run it.
	o := opts(0.83)
	o.AfterRetrain = below(0.84)
	rep, err := Backtest(h, []Policy{p, trig}, o)
	if err != nil {
		t.Fatal(err)
	}
	if rep.Recommendation.Policy == "cusum" || !rep.Results[1].ComparisonOnly {
		t.Errorf("recommended %q; results %+v", rep.Recommendation.Policy, rep.Results[1])
	}
}

func TestHeldLevel(t *testing.T) {
	h := series(4*24*time.Hour, func(t time.Time) float64 {
		if t.Before(t0.Add(24 * time.Hour)) {
			return 0.86
		}
		return 0.80
	})
	level, why := HeldLevel(h)
	near(t, "level from the start", level, 0.86, 1e-12)
	if why == "" {
		t.Error("no reason")
	}
	h.Retrained = make([]bool, len(h.Points))
	h.Retrained[2*24*60] = true // a retrain that brought 0.80
	level, _ = HeldLevel(h)
	near(t, "level after the marked retrain", level, 0.80, 1e-12)
}

// A linear decay's slope is recovered within four standard errors of the
// fit (the tolerance is the fit's own), and the linear model is preferred
// over the exponential; an exponential decay the other way round.
func TestStalenessRecoversDecay(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 9))
	trained := t0
	lin := &History{Source: "linear"}
	exp := &History{Source: "exponential"}
	for d := 0; d < 60; d++ {
		at := trained.Add(time.Duration(d) * 24 * time.Hour)
		age := float64(d)
		lin.Points = append(lin.Points, promq.Point{T: at, V: 0.86 - 0.004*age + 0.003*rng.NormFloat64()})
		exp.Points = append(exp.Points, promq.Point{T: at, V: 0.9 * math.Exp(-0.02*age) * (1 + 0.002*rng.NormFloat64())})
	}
	s, err := Stale(lin, trained, 0.80, 0.01, false, 3*time.Hour)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(s.Linear.B-(-0.004)) > 4*s.Linear.SlopeSE || s.Linear.SlopeSE > 1e-4 {
		t.Errorf("slope %v ± %v, want -0.004", s.Linear.B, s.Linear.SlopeSE)
	}
	near(t, "intercept", s.Linear.A, 0.86, 0.003)
	if s.Best != "linear" {
		t.Errorf("best %s", s.Best)
	}
	// 0.86 - 0.004 d = 0.81 at d = 12.5: weekly (7 days + 3 h) fits, and
	// nothing longer does.
	near(t, "reach", *s.ReachDays, 12.5, 0.5)
	if s.Suggestion.Cron != "0 3 * * 1" {
		t.Errorf("suggestion %+v, want weekly", s.Suggestion)
	}
	e, err := Stale(exp, trained, 0.50, 0.02, false, 3*time.Hour)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "exponential rate", e.Exponential.B, -0.02, 0.0005)
	if e.Best != "exponential" || e.Exponential.R2 < 0.99 {
		t.Errorf("best %s, exponential R² %v", e.Best, e.Exponential.R2)
	}
	// 0.9 e^(-0.02 d) = 0.52 at d = ln(0.9/0.52)/0.02 = 27.4: weekly, not
	// monthly (31 days).
	near(t, "reach", *e.ReachDays, math.Log(0.9/0.52)/0.02, 0.5)
	if e.Suggestion.Cron != "0 3 * * 1" {
		t.Errorf("suggestion %+v", e.Suggestion)
	}
}

func TestStalenessEdges(t *testing.T) {
	flat := &History{Source: "flat"}
	for d := 0; d < 10; d++ {
		flat.Points = append(flat.Points, promq.Point{T: t0.Add(time.Duration(d) * 24 * time.Hour), V: 0.85 + 0.0001*float64(d%2)})
	}
	s, err := Stale(flat, t0, 0.80, 0.01, false, time.Hour)
	if err != nil {
		t.Fatal(err)
	}
	if s.Suggestion.Cron != "" || s.ReachDays != nil {
		t.Errorf("a flat model got a schedule: %+v", s.Suggestion)
	}
	low, err := Stale(flat, t0, 0.90, 0.01, false, time.Hour)
	if err != nil || low.Suggestion.Cron != "" {
		t.Errorf("a model born below target got a schedule: %+v %v", low.Suggestion, err)
	}
	if _, err := Stale(flat, t0.Add(48*time.Hour), 0.8, 0.01, false, time.Hour); err == nil {
		t.Error("points before --trained-at accepted")
	}
}

// A gap in the history: the replay walks through it (no trigger window
// sees a point there) and judges the points after it as the controller
// would, a drop after the gap caught one window after the data resumes.
func TestReplayThroughAGap(t *testing.T) {
	h := &History{Source: "synthetic"}
	resume := t0.Add(62 * 24 * time.Hour)
	for ts := t0; ts.Before(t0.Add(4 * 24 * time.Hour)); ts = ts.Add(time.Minute) {
		at := ts
		v := 0.85
		if ts.After(t0.Add(2 * 24 * time.Hour)) {
			at, v = resume.Add(ts.Sub(t0.Add(2*24*time.Hour))), 0.74
		}
		h.Points = append(h.Points, promq.Point{T: at, V: v})
	}
	res, err := Replay(h, triggerPolicy("trigger", 0.78, time.Hour, 5*time.Minute), opts(0.78), 0.85)
	if err != nil {
		t.Fatal(err)
	}
	// Data resumes at resume+1m; the window is sampled every 5 minutes (13
	// points an hour) and judged on 11 (coverage 0.8): the window ending
	// at resume+55m is the first that holds 11 points, all below.
	if len(res.Retrains) == 0 || !res.Retrains[0].Start.Equal(resume.Add(55*time.Minute)) {
		t.Fatalf("retrains %+v, want the first at %s, 55 minutes after the data resumes", res.Retrains, resume.Add(55*time.Minute))
	}
}

// A replay too long to run is refused with the reason, not ground through.
func TestReplayTooLongIsRefused(t *testing.T) {
	h := &History{Source: "synthetic", Points: []promq.Point{{T: t0, V: 0.85}, {T: t0.Add(100 * 365 * 24 * time.Hour), V: 0.85}}}
	_, err := Replay(h, triggerPolicy("minutely", 0.78, 10*time.Minute, time.Minute), opts(0.78), 0.85)
	var in *InputError
	if !errors.As(err, &in) || !strings.Contains(err.Error(), "takes more than 1000000 steps") {
		t.Fatalf("a century judged every minute: %v", err)
	}
}
