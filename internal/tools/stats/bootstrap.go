package stats

import (
	"math"
	"math/rand/v2"
	"sort"
)

// Bootstrap plans a seeded paired bootstrap: every resample draws rows with
// replacement, the same rows for the candidate and the baseline, and is
// handed to the statistic as a vector of row counts (weights).
//
// For more rows than MaxRows, the bootstrap runs on a seeded random
// subsample of MaxRows rows, and the spread of its resamples is scaled by
// sqrt(m/n) to the full size (the m-out-of-n bootstrap: valid for
// statistics that settle at the usual 1/sqrt(n) rate, as every metric here
// does; it keeps a million-row evaluation to seconds).
type Bootstrap struct {
	Resamples int
	Seed      uint64
	MaxRows   int
}

// Rows picks the rows the bootstrap resamples out of n: all of them, or a
// seeded subsample of MaxRows, in ascending order.
func (b Bootstrap) Rows(n int) []int32 {
	if b.MaxRows <= 0 || n <= b.MaxRows {
		out := make([]int32, n)
		for i := range out {
			out[i] = int32(i)
		}
		return out
	}
	rng := rand.New(rand.NewPCG(b.Seed, 0x5eed0f5ab5a3b1e))
	perm := rng.Perm(n)[:b.MaxRows]
	out := make([]int32, b.MaxRows)
	for i, p := range perm {
		out[i] = int32(p)
	}
	sort.Slice(out, func(i, j int) bool { return out[i] < out[j] })
	return out
}

// Run draws the resamples over m rows and calls stat with each weight
// vector; stat returns one value per statistic (NaN when undefined on that
// resample). It returns, per statistic, the values of all resamples.
func (b Bootstrap) Run(m, stats int, seed uint64, stat func(w []float64, out []float64)) [][]float64 {
	rng := rand.New(rand.NewPCG(b.Seed, seed))
	w := make([]float64, m)
	out := make([]float64, stats)
	draws := make([][]float64, stats)
	for s := range draws {
		draws[s] = make([]float64, b.Resamples)
	}
	for r := 0; r < b.Resamples; r++ {
		clear(w)
		for i := 0; i < m; i++ {
			w[rng.IntN(m)]++
		}
		for s := range out {
			out[s] = math.NaN()
		}
		stat(w, out)
		for s := range out {
			draws[s][r] = out[s]
		}
	}
	return draws
}

// Interval turns bootstrap draws of a difference into an interval and a
// p-value for the full data: estimate is the difference on all n rows,
// centre the difference on the m rows resampled. The draws' deviations from
// centre, scaled by sqrt(m/n), give the percentile interval around estimate
// at confidence, and the two-sided p-value for no difference (how often a
// deviation reaches the estimate's size, with the add-one correction).
// Undefined draws (NaN) are left out; ok is false when fewer than half are
// defined.
func Interval(draws []float64, estimate, centre float64, m, n int, confidence float64) (lo, hi, p float64, ok bool) {
	scale := math.Sqrt(float64(m) / float64(n))
	dev := make([]float64, 0, len(draws))
	for _, d := range draws {
		if !math.IsNaN(d) {
			dev = append(dev, (d-centre)*scale)
		}
	}
	if len(dev) == 0 || len(dev)*2 < len(draws) {
		return math.NaN(), math.NaN(), math.NaN(), false
	}
	sort.Float64s(dev)
	alpha := (1 - confidence) / 2
	lo = estimate + quantile(dev, alpha)
	hi = estimate + quantile(dev, 1-alpha)
	extreme := 0
	for _, d := range dev {
		if math.Abs(d) >= math.Abs(estimate) {
			extreme++
		}
	}
	p = math.Min(1, float64(extreme+1)/float64(len(dev)+1))
	return lo, hi, p, true
}

// quantile is the linearly interpolated quantile of sorted values.
func quantile(sorted []float64, q float64) float64 {
	if len(sorted) == 1 {
		return sorted[0]
	}
	pos := q * float64(len(sorted)-1)
	i := int(math.Floor(pos))
	if i >= len(sorted)-1 {
		return sorted[len(sorted)-1]
	}
	f := pos - float64(i)
	return sorted[i]*(1-f) + sorted[i+1]*f
}
