package backtest

import (
	"fmt"
	"math"
	"sort"
	"time"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/policy"
	"plumbline.dev/plumbline/internal/engine/promq"
	"plumbline.dev/plumbline/internal/engine/trigger"
)

// Policy is one way of deciding when to retrain: a schedule, triggers, a
// CUSUM detector, or any mix, with a cooldown and a fresh-data minimum as
// a ModelLine has them. Trigger queries are not used: the history is the
// series every trigger judges.
type Policy struct {
	Name            string                 `json:"name"`
	Schedule        *v1alpha1.ScheduleSpec `json:"schedule,omitempty"`
	Triggers        []v1alpha1.TriggerSpec `json:"triggers,omitempty"`
	CUSUM           *CUSUMRule             `json:"cusum,omitempty"`
	CooldownSeconds *int32                 `json:"cooldownSeconds,omitempty"`
	// FreshDataAtLeast is the least number of new labelled rows worth
	// training on (the line's checks.freshData.atLeast); it needs the
	// history's labelled_rows.
	FreshDataAtLeast *float64 `json:"freshDataAtLeast,omitempty"`
}

// CUSUMRule starts a retrain when the tabular CUSUM of the quality series
// signals a shift to the bad side of Target by more than K, summed past H
// (in the metric's units). Target defaults to the after-retrain level. The
// controller has no such trigger; it is here to compare with.
type CUSUMRule struct {
	Target *float64 `json:"target,omitempty"`
	K      float64  `json:"k"`
	H      float64  `json:"h"`
}

// Options are the model of the world the replay assumes.
type Options struct {
	// Target is the quality the model should keep; LowerBetter says the
	// metric is an error (below target is then good).
	Target      float64
	LowerBetter bool
	// RetrainTakes is how long from a retrain's start to its new version
	// serving (training, the gate, the rollout).
	RetrainTakes time.Duration
	// AfterRetrain is the quality a retrained model starts at; nil: the
	// level the history held after its earlier retrains (see HeldLevel).
	AfterRetrain *float64
	// Coverage is the share of a trigger window's points that must be
	// there (the manager's --trigger-coverage).
	Coverage float64
	// MinEpisode is the shortest stretch below target counted as a drop to
	// be detected (shorter ones count toward time below target only).
	MinEpisode time.Duration
	// CostRetrain and CostHourBelow price a retrain and an hour below
	// target; both zero: no cost.
	CostRetrain, CostHourBelow float64
	// MaxPerMonth is the most retrains a month the recommendation accepts.
	MaxPerMonth float64
	// LabelDelay is how long after a point its labels come in, when the
	// history does not say (labelled_at); a trigger without a label delay of
	// its own judges with this one.
	LabelDelay time.Duration
}

// lateLabels says whether labels come in late in this replay.
func (o Options) lateLabels(h *History) bool { return h.LabelledAt != nil || o.LabelDelay > 0 }

// labelDelay is a trigger's label delay in a replay: its own
// labelDelaySeconds, else the replay's.
func (o Options) labelDelay(t v1alpha1.TriggerSpec) time.Duration {
	if t.LabelDelaySeconds != nil {
		return time.Duration(*t.LabelDelaySeconds) * time.Second
	}
	return o.LabelDelay
}

// DefaultOptions are the replay's defaults.
func DefaultOptions() Options {
	return Options{RetrainTakes: 3 * time.Hour, Coverage: 0.8, MinEpisode: time.Hour, MaxPerMonth: 8}
}

// Retrain is one retrain a policy started.
type Retrain struct {
	Start  time.Time `json:"start"`
	Effect time.Time `json:"effect"`
	Reason string    `json:"reason"`
}

// Episode is a stretch below target at least MinEpisode long.
type Episode struct {
	Start    time.Time  `json:"start"`
	End      time.Time  `json:"end"`
	Detected *time.Time `json:"detected,omitempty"`
	// DelaySeconds is from the start of the stretch to the retrain that
	// answered it.
	DelaySeconds *float64 `json:"delaySeconds,omitempty"`
}

// Result is what a policy would have done over the history.
type Result struct {
	Policy           string         `json:"policy"`
	Retrains         []Retrain      `json:"retrains"`
	RetrainsPerMonth float64        `json:"retrainsPerMonth"`
	BelowSeconds     float64        `json:"belowTargetSeconds"`
	BelowShare       float64        `json:"belowTargetShare"`
	Episodes         []Episode      `json:"episodes"`
	Missed           int            `json:"missed"`
	MedianDelay      *float64       `json:"medianDelaySeconds,omitempty"`
	MaxDelay         *float64       `json:"maxDelaySeconds,omitempty"`
	Decisions        map[string]int `json:"decisions"`
	Cost             *float64       `json:"cost,omitempty"`
	// ComparisonOnly marks a policy the controller cannot run (CUSUM).
	ComparisonOnly bool `json:"comparisonOnly,omitempty"`
	// Simulated is the quality series under the policy.
	Simulated []promq.Point `json:"-"`
	// LabelDelayCost, when labels come in late, is what that costs this
	// policy against the same replay with every label in at once.
	LabelDelayCost *DelayCost `json:"labelDelayCost,omitempty"`
}

// DelayCost is what late labels cost a policy.
type DelayCost struct {
	// MedianDelaySeconds is how much later drops are acted on (the median
	// delay's growth); nil when either replay acted on none.
	MedianDelaySeconds *float64 `json:"medianDelaySeconds,omitempty"`
	// BelowTargetSeconds is the added time below target.
	BelowTargetSeconds float64 `json:"belowTargetSeconds"`
	// Retrains is the change in the number of retrains.
	Retrains int `json:"retrains"`
}

// HeldLevel is the level a retrained model starts at when none is given:
// the mean quality over the first 24 hours after each retrain the history
// marks, or after its start when it marks none.
func HeldLevel(h *History) (float64, string) {
	var starts []time.Time
	for i, r := range h.Retrained {
		if r {
			starts = append(starts, h.Points[i].T)
		}
	}
	why := fmt.Sprintf("the mean over the first 24 h after each of the %d retrains the history marks", len(starts))
	if len(starts) == 0 {
		starts = []time.Time{h.Points[0].T}
		why = "the mean over the history's first 24 h (a model fresh at its start)"
	}
	sum, n := 0.0, 0
	for _, s := range starts {
		for _, p := range h.Points {
			if !p.T.Before(s) && p.T.Before(s.Add(24*time.Hour)) {
				sum += p.V
				n++
			}
		}
	}
	return sum / float64(n), why
}

func (o Options) bad(v float64) bool {
	if o.LowerBetter {
		return v > o.Target
	}
	return v < o.Target
}

// tick is the replay's clock step: the greatest common divisor of the
// triggers' periods and windows (scheduled starts are visited at their own
// times), else the history's step.
func tick(p Policy, step time.Duration) time.Duration {
	g := int64(0)
	add := func(s int64) {
		if s <= 0 {
			return
		}
		if g == 0 {
			g = s
			return
		}
		for s != 0 {
			g, s = s, g%s
		}
	}
	for _, t := range p.Triggers {
		add(int64(t.EverySeconds))
		add(int64(t.ForSeconds)) // the first evaluation falls on the grid too
	}
	if g == 0 {
		return max(step, time.Second)
	}
	return time.Duration(g) * time.Second
}

// MaxReplaySteps bounds the moments one policy's replay visits (its grid
// and its scheduled starts): about two years judged every minute, a few
// seconds of replay.
const MaxReplaySteps = 1_000_000

// replayer holds one policy's replay.
type replayer struct {
	h        *History
	p        Policy
	o        Options
	level    float64
	sim      []promq.Point
	res      *Result
	inFlight *Retrain
	last     *time.Time // the last retrain's start, whatever started it
	// liveSince is when the last retrain took effect (its promotion).
	liveSince *time.Time
}

// Replay runs a policy over the history. level is the quality a retrain
// restores (see HeldLevel).
func Replay(h *History, p Policy, o Options, level float64) (*Result, error) {
	r := &replayer{h: h, p: p, o: o, level: level,
		sim: append([]promq.Point(nil), h.Points...),
		res: &Result{Policy: p.Name, Retrains: []Retrain{}, Episodes: []Episode{}, Decisions: map[string]int{}, ComparisonOnly: p.CUSUM != nil}}
	if err := r.run(); err != nil {
		return nil, err
	}
	r.measure()
	return r.res, nil
}

func (r *replayer) run() error {
	start, end := r.h.Points[0].T, r.h.Points[len(r.h.Points)-1].T
	step := tick(r.p, r.h.Step())
	lastSchedule := start
	var nextSchedule time.Time
	if s := r.p.Schedule; s != nil {
		st, err := policy.StepSchedule(s, lastSchedule, start, false)
		if err != nil {
			return fmt.Errorf("policy %s: %w", r.p.Name, err)
		}
		nextSchedule = st.Next
	}
	var cusum *CUSUM
	if c := r.p.CUSUM; c != nil {
		target := r.level
		if c.Target != nil {
			target = *c.Target
		}
		cusum = &CUSUM{Target: target, K: c.K, H: c.H}
	}
	cooldown := policy.CooldownOf(r.p.CooldownSeconds)
	// Each point is what a trigger's query returns until the next one:
	// Prometheus's own lookback, or the history's step when longer.
	lookback := max(trigger.Lookback, r.h.Step())
	nextPoint := 0
	var longest time.Duration // the longest trigger window, with its label delay
	for _, t := range r.p.Triggers {
		longest = max(longest, trigger.Window{For: time.Duration(t.ForSeconds) * time.Second, Delay: r.o.labelDelay(t)}.Reach())
	}
	// The replay's clock visits its grid (the triggers' periods) and, as
	// the controller is woken at each, every scheduled start.
	visits := 0
	for now, grid := start, start; !now.After(end); {
		if visits++; visits > MaxReplaySteps {
			return inputErr("policy %s: replaying %s of history every %s takes more than %d steps; replay a shorter stretch of it, or judge less often",
				r.p.Name, r.h.Span(), step, MaxReplaySteps)
		}
		if r.inFlight != nil && !now.Before(r.inFlight.Effect) {
			r.takeEffect(r.inFlight.Effect)
			r.inFlight = nil
			if cusum != nil {
				cusum.Reset()
			}
		}
		// The start sequence, as the controller walks it: the schedule,
		// then the triggers.
		if s := r.p.Schedule; s != nil && !now.Before(nextSchedule) {
			st, err := policy.StepSchedule(s, lastSchedule, now, r.inFlight != nil)
			if err != nil {
				return fmt.Errorf("policy %s: %w", r.p.Name, err)
			}
			nextSchedule = st.Next
			switch st.Action {
			case policy.ScheduleMissed:
				lastSchedule = st.At
				r.res.Decisions[string(policy.ScheduleMissed)]++
			case policy.ScheduleSkipped:
				lastSchedule = st.At
				r.res.Decisions[policy.InFlight]++
			case policy.ScheduleStart:
				// The history answers every check, so a start is always
				// settled.
				lastSchedule = st.At
				r.tryStart(now, policy.PathSchedule, v1alpha1.ReasonSchedule)
			}
		}
		// Each trigger on its period from its first full window.
		var firing []policy.Firing
		for _, t := range r.p.Triggers {
			w := trigger.Window{For: time.Duration(t.ForSeconds) * time.Second, Every: time.Duration(t.EverySeconds) * time.Second, Coverage: r.o.Coverage,
				Delay: r.o.labelDelay(t)}
			first := start.Add(w.For)
			if now.Before(first) || now.Sub(first)%w.Every != 0 {
				continue
			}
			// The window ends a label delay ago, as the controller's does;
			// it holds the points whose labels are in by now.
			end := now.Add(-w.Delay)
			pts := trigger.RangeQueryLookback(r.labelledBy(now, end.Add(-w.For-lookback), end), end.Add(-w.For), end, w.Step(), lookback)
			res := trigger.Judge([]promq.Series{{Points: pts}}, trigger.Threshold{Below: t.Below, Above: t.Above}, w, end)
			if res.State == v1alpha1.TriggerFiring {
				firing = append(firing, policy.Firing{Name: t.Name, Window: w.Reach()})
			}
		}
		if st, ok := policy.StepTriggers(firing, r.inFlight != nil, r.last, cooldown, r.liveSince, now); ok {
			r.startIfMay(now, st, v1alpha1.ReasonTriggerPrefix+st.Trigger)
		}
		// CUSUM on each point up to now.
		for ; nextPoint < len(r.sim) && !r.sim[nextPoint].T.After(now); nextPoint++ {
			if cusum == nil {
				continue
			}
			up, down := cusum.Add(r.sim[nextPoint].V)
			if r.o.LowerBetter && up || !r.o.LowerBetter && down {
				st, _ := policy.StepTriggers([]policy.Firing{{Name: "CUSUM"}}, r.inFlight != nil, r.last, cooldown, r.liveSince, now)
				if r.startIfMay(now, st, "CUSUM") {
					cusum.Reset()
				}
			}
		}
		for !grid.After(now) {
			grid = grid.Add(step)
		}
		// Through a gap in the history no trigger window sees a point, so
		// the grid jumps to the next point.
		if nextPoint > 0 && nextPoint < len(r.sim) {
			seen := r.sim[nextPoint-1].T.Add(longest + lookback)
			if next := r.sim[nextPoint].T; seen.Before(grid) && grid.Before(next) {
				grid = grid.Add(next.Sub(grid).Truncate(step))
				if grid.Before(next) {
					grid = grid.Add(step)
				}
			}
		}
		now = grid
		if r.p.Schedule != nil && nextSchedule.Before(now) {
			now = nextSchedule
		}
	}
	if r.inFlight != nil && !r.inFlight.Effect.After(end) {
		r.takeEffect(r.inFlight.Effect)
	}
	return nil
}

// labelledBy is the simulated series from from to to, without the points
// whose labels are not in at now. With labels at once it is the series.
func (r *replayer) labelledBy(now, from, to time.Time) []promq.Point {
	if !r.o.lateLabels(r.h) {
		return r.sim
	}
	i := sort.Search(len(r.sim), func(i int) bool { return !r.sim[i].T.Before(from) })
	j := sort.Search(len(r.sim), func(j int) bool { return r.sim[j].T.After(to) })
	out := make([]promq.Point, 0, j-i)
	for k := i; k < j; k++ {
		in := r.sim[k].T.Add(r.o.LabelDelay)
		if r.h.LabelledAt != nil {
			in = r.h.LabelledAt[k]
		}
		if !in.After(now) {
			out = append(out, r.sim[k])
		}
	}
	return out
}

// startIfMay counts a trigger step that may not start, or goes on to the
// checks.
func (r *replayer) startIfMay(now time.Time, st policy.TriggerStep, reason string) bool {
	if !st.May() {
		r.res.Decisions[st.Outcome]++
		return false
	}
	return r.tryStart(now, policy.PathTrigger, reason)
}

// tryStart runs the checks the history can answer (fresh data) through the
// controller's decision, and starts a retrain when it says so.
func (r *replayer) tryStart(now time.Time, path, reason string) bool {
	var cr policy.Checks
	if at := r.p.FreshDataAtLeast; at != nil && r.h.Labelled != nil {
		since := r.h.Points[0].T
		if r.last != nil {
			since = *r.last
		}
		rows := r.labelledAt(now) - r.labelledAt(since)
		cr.FreshData = &policy.Check{Kind: "fresh-data", Name: "freshData", Known: true, Value: rows, Breached: rows < *at}
		cr.AtLeast = *at
	}
	v := policy.DecideStart(path, cr)
	r.res.Decisions[v.Outcome]++
	if v.Outcome != policy.Started {
		return false
	}
	t := now
	r.last = &t
	rt := Retrain{Start: now, Effect: now.Add(r.o.RetrainTakes), Reason: reason}
	r.inFlight = &rt
	r.res.Retrains = append(r.res.Retrains, rt)
	return true
}

// labelledAt is the labelled-rows counter at the latest point at or before t.
func (r *replayer) labelledAt(t time.Time) float64 {
	i := sort.Search(len(r.h.Points), func(i int) bool { return r.h.Points[i].T.After(t) }) - 1
	if i < 0 {
		return r.h.Labelled[0]
	}
	return r.h.Labelled[i]
}

// takeEffect is the stated model of a retrain: from the moment it serves,
// the series is the history shifted so that it stands at the after-retrain
// level (against the history's mean over the hour before), and moves as
// the history moved after that.
func (r *replayer) takeEffect(at time.Time) {
	r.liveSince = &at
	sum, n := 0.0, 0
	lastBefore := math.NaN()
	for _, p := range r.h.Points {
		if p.T.After(at) {
			break
		}
		lastBefore = p.V
		if !p.T.Before(at.Add(-time.Hour)) {
			sum += p.V
			n++
		}
	}
	base := lastBefore
	if n > 0 {
		base = sum / float64(n)
	}
	if math.IsNaN(base) {
		return
	}
	offset := r.level - base
	for i := range r.sim {
		if !r.sim[i].T.Before(at) {
			r.sim[i].V = r.h.Points[i].V + offset
		}
	}
}

// measure fills in the figures of the simulated series.
func (r *replayer) measure() {
	res, o := r.res, r.o
	res.Simulated = r.sim
	pts := r.sim
	step := r.h.Step()
	dt := func(i int) time.Duration {
		if i+1 < len(pts) {
			return min(pts[i+1].T.Sub(pts[i].T), 2*step)
		}
		return step
	}
	var below time.Duration
	var cur *Episode
	var curLen time.Duration
	closeEp := func() {
		if cur != nil && curLen >= o.MinEpisode {
			res.Episodes = append(res.Episodes, *cur)
		}
		cur, curLen = nil, 0
	}
	for i, p := range pts {
		if !o.bad(p.V) {
			closeEp()
			continue
		}
		d := dt(i)
		below += d
		if cur != nil && i > 0 && p.T.Sub(pts[i-1].T) > 2*step {
			closeEp() // a gap ends a stretch
		}
		if cur == nil {
			cur = &Episode{Start: p.T}
		}
		cur.End = p.T.Add(d)
		curLen += d
	}
	closeEp()
	res.BelowSeconds = below.Seconds()
	span := r.h.Span() + step
	res.BelowShare = below.Seconds() / span.Seconds()
	res.RetrainsPerMonth = float64(len(res.Retrains)) / (span.Hours() / (30 * 24))
	var delays []float64
	for i := range res.Episodes {
		e := &res.Episodes[i]
		for _, rt := range res.Retrains {
			if !rt.Start.Before(e.Start) && rt.Start.Before(e.End) {
				t := rt.Start
				d := rt.Start.Sub(e.Start).Seconds()
				e.Detected, e.DelaySeconds = &t, &d
				delays = append(delays, d)
				break
			}
		}
		if e.Detected == nil {
			res.Missed++
		}
	}
	if len(delays) > 0 {
		sort.Float64s(delays)
		med := delays[len(delays)/2]
		if len(delays)%2 == 0 {
			med = (delays[len(delays)/2-1] + delays[len(delays)/2]) / 2
		}
		mx := delays[len(delays)-1]
		res.MedianDelay, res.MaxDelay = &med, &mx
	}
	if o.CostRetrain != 0 || o.CostHourBelow != 0 {
		c := float64(len(res.Retrains))*o.CostRetrain + below.Hours()*o.CostHourBelow
		res.Cost = &c
	}
}
