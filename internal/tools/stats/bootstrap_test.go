package stats

import (
	"math"
	"math/rand/v2"
	"testing"
)

// pairedAccuracy draws n rows where the candidate is right with chance pc
// and the baseline with chance pb, correlated (both read the same uniform
// draw on most rows, as two models of the same data would).
func pairedAccuracy(rng *rand.Rand, n int, pc, pb float64) (c, b []float64) {
	c, b = make([]float64, n), make([]float64, n)
	for i := 0; i < n; i++ {
		u := rng.Float64()
		v := u
		if rng.Float64() < 0.3 {
			v = rng.Float64()
		}
		if u < pc {
			c[i] = 1
		}
		if v < pb {
			b[i] = 1
		}
	}
	return c, b
}

func diffOfMeans(c, b []float64, rows []int32) func(w []float64, out []float64) {
	return func(w []float64, out []float64) {
		var sc, sb, n float64
		for j, r := range rows {
			sc += w[j] * c[r]
			sb += w[j] * b[r]
			n += w[j]
		}
		out[0] = (sc - sb) / n
	}
}

// A seeded simulation: the paired bootstrap's 95% interval covers the true
// difference of two accuracies at about its nominal rate, for the full
// bootstrap and for the scaled subsample one. 300 simulated evaluations
// give a standard error of 1.3 points on the coverage; the test accepts 90%
// to 98.5%.
func TestBootstrapCoverage(t *testing.T) {
	if testing.Short() {
		t.Skip("simulation")
	}
	const pc, pb = 0.82, 0.80 // true difference 0.02
	for _, tc := range []struct {
		name    string
		n, max  int
		samples int
	}{
		{"all rows", 2000, 0, 300},
		{"subsample of a fifth", 5000, 1000, 300},
	} {
		t.Run(tc.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(42, uint64(tc.n)))
			covered := 0
			for s := 0; s < tc.samples; s++ {
				c, b := pairedAccuracy(rng, tc.n, pc, pb)
				all := Bootstrap{MaxRows: 0}.Rows(tc.n)
				est := make([]float64, 1)
				diffOfMeans(c, b, all)(ones(tc.n), est)
				bs := Bootstrap{Resamples: 400, Seed: uint64(s), MaxRows: tc.max}
				rows := bs.Rows(tc.n)
				centre := make([]float64, 1)
				diffOfMeans(c, b, rows)(ones(len(rows)), centre)
				draws := bs.Run(len(rows), 1, 7, diffOfMeans(c, b, rows))
				lo, hi, _, ok := Interval(draws[0], est[0], centre[0], len(rows), tc.n, 0.95)
				if !ok {
					t.Fatal("no interval")
				}
				if lo <= pc-pb && pc-pb <= hi {
					covered++
				}
			}
			rate := float64(covered) / float64(tc.samples)
			t.Logf("coverage %.3f", rate)
			if rate < 0.90 || rate > 0.985 {
				t.Errorf("95%% intervals covered the true difference %.1f%% of the time", 100*rate)
			}
		})
	}
}

func ones(n int) []float64 {
	w := make([]float64, n)
	for i := range w {
		w[i] = 1
	}
	return w
}

// With no difference, the p-value is rarely small; with a large one, it is.
func TestBootstrapPValue(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 3))
	check := func(pc, pb float64, small bool) {
		c, b := pairedAccuracy(rng, 3000, pc, pb)
		bs := Bootstrap{Resamples: 500, Seed: 1}
		rows := bs.Rows(len(c))
		est := make([]float64, 1)
		diffOfMeans(c, b, rows)(ones(len(rows)), est)
		draws := bs.Run(len(rows), 1, 1, diffOfMeans(c, b, rows))
		_, _, p, _ := Interval(draws[0], est[0], est[0], len(rows), len(rows), 0.95)
		if (p < 0.01) != small {
			t.Errorf("pc %.2f pb %.2f: p = %.4f", pc, pb, p)
		}
	}
	check(0.85, 0.75, true)
	check(0.80, 0.80, false)
}

func TestBootstrapRowsAndDeterminism(t *testing.T) {
	b := Bootstrap{Resamples: 10, Seed: 9, MaxRows: 100}
	rows := b.Rows(1000)
	if len(rows) != 100 {
		t.Fatalf("%d rows", len(rows))
	}
	for i := 1; i < len(rows); i++ {
		if rows[i] <= rows[i-1] || rows[i] >= 1000 {
			t.Fatalf("rows not ascending and distinct: %v", rows)
		}
	}
	again := b.Rows(1000)
	for i := range rows {
		if rows[i] != again[i] {
			t.Fatal("the same seed picked other rows")
		}
	}
	if len(b.Rows(50)) != 50 {
		t.Error("fewer rows than the bound: all of them")
	}
	sum := func(w []float64, out []float64) {
		for _, x := range w {
			out[0] += x
		}
	}
	d := b.Run(30, 1, 5, func(w []float64, out []float64) { out[0] = 0; sum(w, out) })
	for _, v := range d[0] {
		if v != 30 {
			t.Errorf("a resample of 30 rows has weight %v", v)
		}
	}
	if _, _, _, ok := Interval([]float64{math.NaN(), math.NaN(), 1}, 0, 0, 3, 3, 0.95); ok {
		t.Error("an interval from mostly undefined draws")
	}
}
