package trigger

import (
	"math"
	"math/rand/v2"
	"sort"
	"time"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/promq"
)

// Lookback is how far back Prometheus looks for a sample at each step of a
// range query (its default lookback delta).
const Lookback = 5 * time.Minute

// RangeQuery answers a range query over recorded samples the way Prometheus
// answers a plain selector: at each step from start to end, the latest
// sample at or before it, if that is no older than Lookback.
func RangeQuery(samples []promq.Point, start, end time.Time, step time.Duration) []promq.Point {
	return RangeQueryLookback(samples, start, end, step, Lookback)
}

// RangeQueryLookback is RangeQuery with another lookback: a history
// recorded every 15 minutes holds each value until the next.
func RangeQueryLookback(samples []promq.Point, start, end time.Time, step, lookback time.Duration) []promq.Point {
	var out []promq.Point
	for t := start; !t.After(end); t = t.Add(step) {
		i := sort.Search(len(samples), func(i int) bool { return samples[i].T.After(t) }) - 1
		if i >= 0 && t.Sub(samples[i].T) <= lookback {
			out = append(out, promq.Point{T: t, V: samples[i].V})
		}
	}
	return out
}

// Replay judges a trigger over recorded samples as the controller would:
// every w.Every from the first time a full window is available, on the
// range query the controller would send. It returns the state at each
// evaluation.
func Replay(samples []promq.Point, th Threshold, w Window) []Evaluation {
	if len(samples) == 0 {
		return nil
	}
	start := samples[0].T.Add(w.For)
	end := samples[len(samples)-1].T
	var out []Evaluation
	for now := start; !now.After(end); now = now.Add(w.Every) {
		pts := RangeQuery(samples, now.Add(-w.For), now, w.Step())
		r := Judge([]promq.Series{{Points: pts}}, th, w, now)
		out = append(out, Evaluation{At: now, State: r.State})
	}
	return out
}

// Evaluation is a trigger's state at one evaluation.
type Evaluation struct {
	At    time.Time
	State v1alpha1.TriggerState
}

// Episodes counts the times a replay entered Firing.
func Episodes(evals []Evaluation) int {
	n := 0
	prev := v1alpha1.TriggerInactive
	for _, e := range evals {
		if e.State == v1alpha1.TriggerFiring && prev != v1alpha1.TriggerFiring {
			n++
		}
		if e.State != v1alpha1.TriggerUnknown {
			prev = e.State
		}
	}
	return n
}

// UnknownShare is the share of evaluations that could not judge.
func UnknownShare(evals []Evaluation) float64 {
	if len(evals) == 0 {
		return 0
	}
	n := 0
	for _, e := range evals {
		if e.State == v1alpha1.TriggerUnknown {
			n++
		}
	}
	return float64(n) / float64(len(evals))
}

// FirstFiring is the time of the first evaluation at or after `after` that
// found Firing; false when none did.
func FirstFiring(evals []Evaluation, after time.Time) (time.Time, bool) {
	for _, e := range evals {
		if !e.At.Before(after) && e.State == v1alpha1.TriggerFiring {
			return e.At, true
		}
	}
	return time.Time{}, false
}

// NoisySeries is a seeded synthetic quality series for studying false
// alarms: a stationary AR(1) process around mean with marginal standard
// deviation sd and lag-one autocorrelation rho, one point per step, with
// scrapes lost in bursts (each point starts a gap with probability gapRate;
// gaps last 1 to maxGap points). A drop of size drop, when not zero, starts
// at dropAt.
type NoisySeries struct {
	Seed     uint64
	Start    time.Time
	Step     time.Duration
	Points   int
	Mean, SD float64
	Rho      float64
	GapRate  float64
	MaxGap   int
	Drop     float64
	DropAt   time.Time
}

// Generate draws the series.
func (s NoisySeries) Generate() []promq.Point {
	rng := rand.New(rand.NewPCG(s.Seed, 0x9e3779b97f4a7c15))
	innov := s.SD * math.Sqrt(1-s.Rho*s.Rho)
	dev := rng.NormFloat64() * s.SD
	out := make([]promq.Point, 0, s.Points)
	gap := 0
	for i := 0; i < s.Points; i++ {
		t := s.Start.Add(time.Duration(i) * s.Step)
		dev = s.Rho*dev + rng.NormFloat64()*innov
		if gap == 0 && s.GapRate > 0 && rng.Float64() < s.GapRate {
			gap = 1 + rng.IntN(max(1, s.MaxGap))
		}
		if gap > 0 {
			gap--
			continue
		}
		v := s.Mean + dev
		if s.Drop != 0 && !t.Before(s.DropAt) {
			v -= s.Drop
		}
		out = append(out, promq.Point{T: t, V: v})
	}
	return out
}
