package datacheck

import (
	"fmt"
	"math/rand/v2"
	"path/filepath"
	"strings"
	"testing"
)

// simBatch writes a batch of n rows of ten independent features: six
// numeric (normal, exponential, uniform, two by two), four categorical.
// shift moves the first numeric feature's mean by that many standard
// deviations and reweights the first categorical feature's categories.
func simBatch(t *testing.T, path string, rng *rand.Rand, n int, shift float64) {
	t.Helper()
	probs := []float64{0.3, 0.25, 0.2, 0.15, 0.1}
	if shift != 0 {
		probs = []float64{0.15, 0.25, 0.2, 0.15, 0.25}
	}
	base := []float64{0.3, 0.25, 0.2, 0.15, 0.1}
	pick := func(p []float64) string {
		u := rng.Float64()
		for i, q := range p {
			if u < q {
				return fmt.Sprintf("c%d", i)
			}
			u -= q
		}
		return fmt.Sprintf("c%d", len(p)-1)
	}
	var b strings.Builder
	b.WriteString("n1,n2,n3,n4,n5,n6,k1,k2,k3,k4\n")
	for i := 0; i < n; i++ {
		fmt.Fprintf(&b, "%.6f,%.6f,%.6f,%.6f,%.6f,%.6f,%s,%s,%s,%s\n",
			rng.NormFloat64()+shift, rng.NormFloat64(), rng.ExpFloat64(), rng.ExpFloat64(), rng.Float64(), rng.Float64(),
			pick(probs), pick(base), pick(base), pick(base))
	}
	write(t, filepath.Dir(path), filepath.Base(path), b.String())
}

// With no drift, each test rejects at about its level, and after the
// Benjamini-Hochberg correction a batch has any feature below alpha at
// about alpha: under the global null with independent tests the correction
// holds the chance of any rejection at alpha (Simes' test). Bounds are
// about four standard errors of a binomial share, so a correct engine
// fails them with a chance of about 1e-4; the seed makes the run repeat.
func TestNoDriftFlaggedAtNominalRate(t *testing.T) {
	if testing.Short() {
		t.Skip("simulation")
	}
	const runs, n, alpha = 400, 400, 0.05
	dir := t.TempDir()
	ref, cur := filepath.Join(dir, "ref.csv"), filepath.Join(dir, "cur.csv")
	rng := rand.New(rand.NewPCG(2026, 12))
	var tests, rawRejects, runsAny, runsFlagged, runsDetected int
	for r := 0; r < runs; r++ {
		simBatch(t, ref, rng, n, 0)
		simBatch(t, cur, rng, n, 0)
		o := opts(ref, cur)
		o.Alpha = alpha
		rep, err := Run(o)
		if err != nil {
			t.Fatal(err)
		}
		anyAdj, anyFlag := false, false
		for _, c := range rep.Columns {
			d := c.Drift
			tests++
			if *d.PValue < alpha {
				rawRejects++
			}
			anyAdj = anyAdj || *d.PAdjusted < alpha
			anyFlag = anyFlag || d.Drifted
		}
		if anyAdj {
			runsAny++
		}
		if anyFlag {
			runsFlagged++
		}
		if rep.Drift.Detected {
			runsDetected++
		}
		if !rep.DataQuality.OK {
			t.Fatalf("run %d: findings on clean synthetic data: %+v", r, rep.DataQuality.Findings)
		}
	}
	raw := float64(rawRejects) / float64(tests)
	fwer := float64(runsAny) / runs
	t.Logf("no drift: raw rejection rate %.4f over %d tests; batches with any adjusted p < %.2f: %.4f; flagged (with PSI): %.4f; dataset drift: %.4f",
		raw, tests, alpha, fwer, float64(runsFlagged)/runs, float64(runsDetected)/runs)
	if raw < 0.036 || raw > 0.064 {
		t.Errorf("raw rejection rate %.4f, want about %.2f", raw, alpha)
	}
	if fwer < 0.02 || fwer > 0.085 {
		t.Errorf("rate of batches with any rejection after correction %.4f, want about %.2f", fwer, alpha)
	}
	if runsFlagged > runsAny || runsDetected > runsFlagged {
		t.Errorf("the PSI gate and the share can only lower the rate: %d flagged, %d detected, %d rejected", runsFlagged, runsDetected, runsAny)
	}
}

// A half-standard-deviation shift of one numeric feature and a reweighting
// of one categorical feature's categories are flagged, and the others are
// rarely flagged.
func TestShiftedFeaturesAreFlagged(t *testing.T) {
	if testing.Short() {
		t.Skip("simulation")
	}
	const runs, n = 60, 2000
	dir := t.TempDir()
	ref, cur := filepath.Join(dir, "ref.csv"), filepath.Join(dir, "cur.csv")
	rng := rand.New(rand.NewPCG(7, 11))
	flagged := map[string]int{}
	detected := 0
	for r := 0; r < runs; r++ {
		simBatch(t, ref, rng, n, 0)
		simBatch(t, cur, rng, n, 0.5)
		rep, err := Run(opts(ref, cur))
		if err != nil {
			t.Fatal(err)
		}
		for _, name := range rep.Drift.Drifted {
			flagged[name]++
		}
		if rep.Drift.Detected {
			detected++
		}
	}
	t.Logf("shifted: flagged %v in %d runs; dataset drift in %d", flagged, runs, detected)
	if flagged["n1"] < runs*95/100 || flagged["k1"] < runs*95/100 {
		t.Errorf("shifted features flagged n1 %d, k1 %d of %d runs", flagged["n1"], flagged["k1"], runs)
	}
	for name, c := range flagged {
		if name != "n1" && name != "k1" && c > runs/10 {
			t.Errorf("%s flagged in %d of %d runs without a shift", name, c, runs)
		}
	}
	// Two of ten features is a share of 0.2, under the default 0.25.
	if detected != 0 {
		t.Errorf("dataset drift in %d runs with 2 of 10 features drifted (share 0.2 < 0.25)", detected)
	}
}
