package evaluate

import (
	"math"
	"math/rand/v2"
	"testing"

	"plumbline.dev/plumbline/internal/tools/stats"
)

// The fused bootstrap kernel gives exactly what the stats package's
// functions (checked against published values) give, on random data with
// ties and random resample weights.
func TestBinKernelMatchesStats(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	for trial := 0; trial < 20; trial++ {
		n := 50 + rng.IntN(400)
		ds := &Dataset{Task: Binary, N: n, CandProb: trial%3 != 0, BaseProb: true}
		for i := 0; i < n; i++ {
			y := uint8(0)
			if rng.Float64() < 0.35 {
				y = 1
			}
			ds.Label = append(ds.Label, y)
			// Rounded scores, so ties happen.
			ds.Cand = append(ds.Cand, math.Round((0.3*float64(y)+0.7*rng.Float64())*20)/20)
			ds.Base = append(ds.Base, math.Round(rng.Float64()*10)/10)
		}
		if !ds.CandProb {
			ds.Cand[0] = 1.5
		}
		all := make([]int32, n)
		for i := range all {
			all[i] = int32(i)
		}
		g := subset(ds, "", all, Settings{Threshold: 0.5})
		k := newBinKernel(g)
		w := make([]float64, n)
		for i := 0; i < n; i++ {
			w[rng.IntN(n)]++
		}
		got := make([]float64, len(metricNames[Binary]))
		k.run(w, got)
		c, b := g.metrics(true, w), g.metrics(false, w)
		for i, name := range metricNames[Binary] {
			want := math.NaN()
			if c[i].Defined() && b[i].Defined() {
				want = c[i].V - b[i].V
			}
			if !(math.IsNaN(want) && math.IsNaN(got[i]) || math.Abs(want-got[i]) < 1e-12) {
				t.Errorf("trial %d, %s: kernel %v, stats %v", trial, name, got[i], want)
			}
		}
	}
	_ = stats.Value{}
}
