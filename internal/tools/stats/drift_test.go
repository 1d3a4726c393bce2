package stats

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/gonum/stat/distuv"
)

// Source: SciPy test suite, ks_2samp: [1.01,2.01] vs [1,2,3] gives D=1/3,
// p=1.0; [1.01,2.01] vs [1,2,3,4] gives D=0.5, p=14/15 (exact).
func TestKSReference(t *testing.T) {
	r := KSTest([]float64{1.01, 2.01}, []float64{1, 2, 3})
	near(t, "D", r.D, 1.0/3, 1e-12)
	near(t, "p", r.PValue, 1.0, 1e-12)
	if !r.Exact {
		t.Error("small samples: want the exact p-value")
	}
	r = KSTest([]float64{1.01, 2.01}, []float64{1, 2, 3, 4})
	near(t, "D", r.D, 0.5, 1e-12)
	near(t, "p", r.PValue, 14.0/15, 1e-12)
	// gonum gives the same D by another route.
	near(t, "D (gonum)", stat.KolmogorovSmirnov([]float64{1.01, 2.01}, nil, []float64{1, 2, 3, 4}, nil), 0.5, 1e-12)
}

// gkTwoSided is P(D >= k/n) for two samples of n values each, by the
// Gnedenko-Korolyuk formula: 2 * sum over j >= 1 of (-1)^(j+1) *
// C(2n, n - jk) / C(2n, n). An independent route to the exact p-value.
func gkTwoSided(n, k int) float64 {
	lchoose := func(a, b int) float64 {
		x, _ := math.Lgamma(float64(a + 1))
		y, _ := math.Lgamma(float64(b + 1))
		z, _ := math.Lgamma(float64(a - b + 1))
		return x - y - z
	}
	sum := 0.0
	for j := 1; n-j*k >= 0; j++ {
		term := math.Exp(lchoose(2*n, n-j*k) - lchoose(2*n, n))
		if j%2 == 0 {
			term = -term
		}
		sum += term
	}
	return 2 * sum
}

// The exact p-value is used while both samples hold at most 10,000
// values, as SciPy's ks_2samp does by default (method "auto"); the
// asymptotic one above. At 200 x 200 with D = 27/200 the exact p is
// 0.0521 and the asymptotic 0.0475: on the two sides of 0.05 (figures from
// the check against SciPy; the exact one derived again here by the
// Gnedenko-Korolyuk formula).
func TestKSExactUpToTenThousand(t *testing.T) {
	a, b := make([]float64, 200), make([]float64, 200)
	for i := range a {
		a[i] = float64(i)
		b[i] = float64(i) + 27 // the empirical distributions differ by 27/200 at most
	}
	r := KSTest(a, b)
	near(t, "D", r.D, 27.0/200, 1e-12)
	if !r.Exact {
		t.Error("200 x 200: want the exact p-value")
	}
	near(t, "exact p (Gnedenko-Korolyuk)", r.PValue, gkTwoSided(200, 27), 1e-9)
	near(t, "exact p (SciPy, as the issue reports it)", r.PValue, 0.0521, 5e-5)
	for _, c := range []struct {
		n, m  int
		exact bool
	}{{10000, 10000, true}, {10000, 3, true}, {10001, 50, false}} {
		if got := KSExact(c.n, c.m); got != c.exact {
			t.Errorf("%d x %d: exact %v, want %v", c.n, c.m, got, c.exact)
		}
	}
}

// The band-limited lattice count agrees with the closed form for equal
// sizes, and with the full count for unequal ones (derived checks).
func TestKSExactAgrees(t *testing.T) {
	for _, c := range []struct{ n, k int }{{5, 2}, {50, 9}, {500, 40}, {3000, 80}} {
		near(t, "exact p against Gnedenko-Korolyuk", ksExactP(float64(c.k)/float64(c.n), c.n, c.n), gkTwoSided(c.n, c.k), 1e-9)
	}
	// Source: SciPy test suite, ks_2samp: 14/15 for D=0.5 at 2 x 4 (exact).
	near(t, "2 x 4", ksExactP(0.5, 2, 4), 14.0/15, 1e-12)
}

// Above 10,000 values the asymptotic p-value is used; it agrees with the
// exact one where both can be had (derived check: both routes on 10,010 x
// 100 values).
func TestKSAsymptoticNearExact(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 5))
	a, b := make([]float64, 10010), make([]float64, 100)
	for i := range a {
		a[i] = rng.NormFloat64()
	}
	for i := range b {
		b[i] = rng.NormFloat64() + 0.3
	}
	r := KSTest(a, b)
	exact := ksExactP(r.D, len(a), len(b))
	if math.Abs(r.PValue-exact) > 0.02 {
		t.Errorf("asymptotic p %.4f, exact %.4f", r.PValue, exact)
	}
	if r.Exact {
		t.Error("10,010 x 100 should use the asymptotic route")
	}
	near(t, "D (gonum)", r.D, stat.KolmogorovSmirnov(a, nil, b, nil), 1e-12)
}

// Source: SciPy documentation, wasserstein_distance: [0,1,3] vs [5,6,8] is
// 5.0; [0,1] vs [0,1] with weights [3,1] and [2,2] is 0.25.
func TestWassersteinReference(t *testing.T) {
	near(t, "W1", Wasserstein1([]float64{0, 1, 3}, []float64{5, 6, 8}, nil, nil), 5.0, 1e-12)
	near(t, "W1 weighted", Wasserstein1([]float64{0, 1}, []float64{0, 1}, []float64{3, 1}, []float64{2, 2}), 0.25, 1e-12)
	near(t, "W1 sorted", Wasserstein1Sorted([]float64{0, 1, 3}, []float64{5, 6, 8}), 5.0, 1e-12)
}

// The merge needs no sort and agrees with the general form, ties included.
func TestWassersteinSortedAgrees(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for trial := 0; trial < 50; trial++ {
		a := make([]float64, 1+rng.IntN(60))
		b := make([]float64, 1+rng.IntN(60))
		for i := range a {
			a[i] = float64(rng.IntN(12)) // ties, on purpose
		}
		for i := range b {
			b[i] = float64(rng.IntN(15)) + 0.5*float64(rng.IntN(2))
		}
		want := Wasserstein1(a, b, nil, nil)
		slices.Sort(a)
		slices.Sort(b)
		near(t, "W1 sorted vs general", Wasserstein1Sorted(a, b), want, 1e-9)
	}
}

// Source: SciPy documentation, jensenshannon: [1,0,0] vs [0,1,0] in base 2
// is 1.0; identical inputs 0.0. gonum's stat.JensenShannon is the divergence
// in nats: the square of the distance in base e.
func TestJensenShannonReference(t *testing.T) {
	near(t, "JS", JensenShannonDistance([]float64{1, 0, 0}, []float64{0, 1, 0}, 2), 1.0, 1e-12)
	near(t, "JS identical", JensenShannonDistance([]float64{0.2, 0.3, 0.5}, []float64{0.2, 0.3, 0.5}, 2), 0, 1e-12)
	p, q := []float64{0.1, 0.4, 0.5}, []float64{0.3, 0.3, 0.4}
	d := JensenShannonDistance(p, q, math.E)
	near(t, "JS vs gonum", d*d, stat.JensenShannon(p, q), 1e-12)
}

// Source: SciPy documentation, chi2_contingency: [[10,10,20],[20,20,20]]
// gives 2.7777777777777777, dof 2, p=0.24935220877729619, expected
// [[12,12,16],[18,18,24]].
func TestChiSquareHomogeneityReference(t *testing.T) {
	x, dof, p, exp := ChiSquareHomogeneity([][]float64{{10, 10, 20}, {20, 20, 20}})
	near(t, "statistic", x, 2.7777777777777777, 1e-12)
	if dof != 2 {
		t.Errorf("dof %d", dof)
	}
	near(t, "p", p, 0.24935220877729619, 1e-12)
	want := [][]float64{{12, 12, 16}, {18, 18, 24}}
	for i := range want {
		for j := range want[i] {
			near(t, "expected", exp[i][j], want[i][j], 1e-12)
		}
	}
	// Cross-check the p-value with gonum's chi-square distribution.
	near(t, "p (gonum)", p, 1-distuv.ChiSquared{K: 2}.CDF(x), 1e-12)
}

// PSI equals KL(a, e) + KL(e, a): an identity derived from its definition,
// checked with gonum's stat.KullbackLeibler (no bin empty, so no floor).
func TestPSIIsSymmetrisedKL(t *testing.T) {
	e := []float64{0.1, 0.2, 0.3, 0.4}
	a := []float64{0.25, 0.25, 0.25, 0.25}
	near(t, "PSI", PSI(e, a), stat.KullbackLeibler(a, e)+stat.KullbackLeibler(e, a), 1e-12)
	near(t, "PSI of equal", PSI(e, e), 0, 1e-15)
	// Counts work like shares.
	near(t, "PSI of counts", PSI([]float64{10, 20, 30, 40}, []float64{5, 5, 5, 5}), PSI(e, a), 1e-12)
	// An empty bin is floored, not infinite.
	if v := PSI([]float64{0.5, 0.5, 0}, []float64{0.4, 0.4, 0.2}); math.IsInf(v, 0) || v <= 0 {
		t.Errorf("PSI with an empty bin = %v", v)
	}
}

// The asymptotic Kolmogorov distribution at its usual critical values:
// P(K > 1.2238) = 0.10, P(K > 1.3581) = 0.05, P(K > 1.6276) = 0.01. These are
// the widely tabulated critical values of the Kolmogorov distribution (value
// from memory); the series reproduces them to four places.
func TestKolmogorovCriticalValues(t *testing.T) {
	near(t, "K 0.10", kolmogorovSurvival(1.2238), 0.10, 1e-4)
	near(t, "K 0.05", kolmogorovSurvival(1.3581), 0.05, 1e-4)
	near(t, "K 0.01", kolmogorovSurvival(1.6276), 0.01, 1e-4)
	near(t, "K small", kolmogorovSurvival(0.1), 1, 0)
}
