package backtest

import (
	"fmt"
	"math"
	"time"
)

// Fit is a decay curve of quality against the model's age in days:
// linear q = A + B*age, or exponential q = A*exp(B*age) (fitted by least
// squares on log q). R2 and RMSE are on the quality scale for both, so
// they compare.
type Fit struct {
	Model string  `json:"model"`
	A     float64 `json:"a"`
	B     float64 `json:"b"`
	R2    float64 `json:"r2"`
	RMSE  float64 `json:"rmse"`
	// SlopeSE is the standard error of B (linear fit), for the tolerance of
	// a recovered slope.
	SlopeSE float64 `json:"slopeStandardError,omitempty"`
	// Unfit says why the model could not be fitted.
	Unfit string `json:"unfit,omitempty"`
}

// At is the fitted quality at an age in days.
func (f Fit) At(age float64) float64 {
	if f.Model == "exponential" {
		return f.A * math.Exp(f.B*age)
	}
	return f.A + f.B*age
}

// Suggestion is a schedule that keeps quality on the good side of target
// plus a margin.
type Suggestion struct {
	Cron       string  `json:"cron,omitempty"`
	PeriodDays float64 `json:"periodDays,omitempty"`
	Why        string  `json:"why"`
}

// Staleness is how a model's quality decays with its age.
type Staleness struct {
	TrainedAt   time.Time `json:"trainedAt"`
	Points      int       `json:"points"`
	Linear      Fit       `json:"linear"`
	Exponential Fit       `json:"exponential"`
	Best        string    `json:"best"`
	Target      float64   `json:"target"`
	Margin      float64   `json:"margin"`
	// Better says which way is better for the metric: higher or lower.
	Better     string     `json:"better"`
	ReachDays  *float64   `json:"reachDays,omitempty"`
	Suggestion Suggestion `json:"suggestion"`
}

// ols fits y = a + b*x by least squares, with b's standard error.
func ols(x, y []float64) (a, b, se float64) {
	n := float64(len(x))
	var mx, my float64
	for i := range x {
		mx += x[i]
		my += y[i]
	}
	mx /= n
	my /= n
	var sxx, sxy float64
	for i := range x {
		sxx += (x[i] - mx) * (x[i] - mx)
		sxy += (x[i] - mx) * (y[i] - my)
	}
	b = sxy / sxx
	a = my - b*mx
	if len(x) > 2 {
		var ss float64
		for i := range x {
			r := y[i] - a - b*x[i]
			ss += r * r
		}
		se = math.Sqrt(ss / (n - 2) / sxx)
	}
	return a, b, se
}

func goodness(f *Fit, x, y []float64) {
	var my float64
	for _, v := range y {
		my += v
	}
	my /= float64(len(y))
	var ssr, sst float64
	for i := range x {
		r := y[i] - f.At(x[i])
		ssr += r * r
		sst += (y[i] - my) * (y[i] - my)
	}
	f.RMSE = math.Sqrt(ssr / float64(len(y)))
	f.R2 = 1 - ssr/sst
	if sst == 0 {
		f.R2 = math.NaN()
	}
}

// schedules are the cron schedules a suggestion picks from, shortest
// period first; the period is the longest gap between two starts.
var schedules = []struct {
	days float64
	cron string
	name string
}{
	{1, "0 3 * * *", "daily"},
	{4, "0 3 * * 1,4", "twice a week (Mondays and Thursdays)"},
	{7, "0 3 * * 1", "weekly"},
	{31, "0 3 1 * *", "monthly"},
}

// Stale fits the decay of a model trained at trainedAt and suggests the
// longest schedule that keeps the fitted quality on the good side of
// target plus margin, counting the time a retrain takes to serve.
func Stale(h *History, trainedAt time.Time, target, margin float64, lowerIsBetter bool, takes time.Duration) (*Staleness, error) {
	var x, y []float64
	for _, p := range h.Points {
		if p.T.Before(trainedAt) {
			return nil, inputErr("%s: a point at %s is before --trained-at %s; give the quality of one model from its training on", h.Source, p.T.Format(time.RFC3339), trainedAt.Format(time.RFC3339))
		}
		x = append(x, p.T.Sub(trainedAt).Hours()/24)
		y = append(y, p.V)
	}
	if len(x) < 3 {
		return nil, inputErr("%s: %d points; fitting a decay needs at least three", h.Source, len(x))
	}
	if x[len(x)-1]-x[0] <= 0 {
		return nil, inputErr("%s: every point is at the same age", h.Source)
	}
	s := &Staleness{TrainedAt: trainedAt, Points: len(x), Target: target, Margin: margin, Better: betterWord(lowerIsBetter)}
	a, b, se := ols(x, y)
	s.Linear = Fit{Model: "linear", A: a, B: b, SlopeSE: se}
	goodness(&s.Linear, x, y)
	s.Exponential = Fit{Model: "exponential"}
	positive := true
	for _, v := range y {
		positive = positive && v > 0
	}
	if positive {
		ly := make([]float64, len(y))
		for i, v := range y {
			ly[i] = math.Log(v)
		}
		la, lb, _ := ols(x, ly)
		s.Exponential.A, s.Exponential.B = math.Exp(la), lb
		goodness(&s.Exponential, x, y)
	} else {
		s.Exponential.Unfit = "the series has values at or below 0"
	}
	best := s.Linear
	s.Best = "linear"
	if s.Exponential.Unfit == "" && s.Exponential.RMSE < s.Linear.RMSE {
		best = s.Exponential
		s.Best = "exponential"
	}
	bound := target + margin
	worse := func(v float64) bool { return v < bound }
	if lowerIsBetter {
		bound = target - margin
		worse = func(v float64) bool { return v > bound }
	}
	switch {
	case worse(best.At(0)):
		s.Suggestion.Why = fmt.Sprintf("a freshly trained model already starts at %.4g, on the wrong side of %.4g (target and margin): a schedule cannot keep it there; look at the data or the model", best.At(0), bound)
		return s, nil
	case !worse(best.At(3650)):
		s.Suggestion.Why = fmt.Sprintf("the %s fit does not decay past %.4g within ten years: no schedule is needed on this evidence; keep a trigger for sudden drops", s.Best, bound)
		return s, nil
	}
	// The age at which the fit crosses the bound, by bisection (both fits
	// are monotone).
	lo, hi := 0.0, 3650.0
	for i := 0; i < 100; i++ {
		mid := (lo + hi) / 2
		if worse(best.At(mid)) {
			hi = mid
		} else {
			lo = mid
		}
	}
	reach := lo
	s.ReachDays = &reach
	budget := reach - takes.Hours()/24
	var pick *struct {
		days float64
		cron string
		name string
	}
	for i := range schedules {
		if schedules[i].days <= budget {
			pick = &schedules[i]
		}
	}
	if pick == nil {
		s.Suggestion.Why = fmt.Sprintf("the %s fit reaches %.4g after %.1f days, less than a day plus the %s a retrain takes: retrain on a trigger, or more often than daily", s.Best, bound, reach, takes)
		return s, nil
	}
	s.Suggestion = Suggestion{Cron: pick.cron, PeriodDays: pick.days,
		Why: fmt.Sprintf("the %s fit (R² %.3f) reaches %.4g (target %.4g with margin %.4g) %.1f days after training; %s (at most %g days between starts, plus %s to serve) is the longest schedule that retrains before that",
			s.Best, best.R2, bound, target, margin, reach, pick.name, pick.days, takes)}
	return s, nil
}
