package stats

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/integrate"
	"gonum.org/v1/gonum/stat"
)

func near(t *testing.T, what string, got, want, tol float64) {
	t.Helper()
	if math.IsNaN(got) || math.Abs(got-want) > tol {
		t.Errorf("%s = %.10g, want %.10g (within %g)", what, got, want, tol)
	}
}

func u8(v ...int) []uint8 {
	out := make([]uint8, len(v))
	for i, x := range v {
		out[i] = uint8(x)
	}
	return out
}

func i32(v ...int) []int32 {
	out := make([]int32, len(v))
	for i, x := range v {
		out[i] = int32(x)
	}
	return out
}

// Source: scikit-learn documentation, balanced_accuracy_score example:
// y=[0,1,0,0,1,0], pred=[0,1,0,0,0,1] gives 0.625.
func TestBalancedAccuracyReference(t *testing.T) {
	c := BinaryConfusion(u8(0, 1, 0, 0, 1, 0), u8(0, 1, 0, 0, 0, 1), nil)
	near(t, "balanced accuracy", c.BalancedAccuracy().V, 0.625, 1e-12)
	// The multiclass route gives the same for two classes.
	m := MulticlassConfusion(2, i32(0, 1, 0, 0, 1, 0), i32(0, 1, 0, 0, 0, 1), nil)
	near(t, "balanced accuracy (multiclass route)", m.BalancedAccuracy().V, 0.625, 1e-12)
}

// Source: scikit-learn documentation, f1_score, precision_score and
// recall_score examples: y=[0,1,2,0,1,2], pred=[0,2,1,0,0,1]: F1 per class
// [0.8, 0, 0], macro 0.2667, micro 0.3333; precision per class [0.6667, 0,
// 0]; recall per class [1, 0, 0].
func TestMulticlassReference(t *testing.T) {
	m := MulticlassConfusion(3, i32(0, 1, 2, 0, 1, 2), i32(0, 2, 1, 0, 0, 1), nil)
	p, r, f := m.PerClass()
	for k, want := range []float64{0.8, 0, 0} {
		near(t, "f1 of class", f[k], want, 1e-4)
	}
	for k, want := range []float64{2.0 / 3, 0, 0} {
		near(t, "precision of class", p[k], want, 1e-4)
	}
	for k, want := range []float64{1, 0, 0} {
		near(t, "recall of class", r[k], want, 1e-12)
	}
	near(t, "macro F1", m.Macro(f).V, 0.2667, 1e-4)
	near(t, "micro F1", m.MicroF1().V, 0.3333, 1e-4)
	// Weighted F1: every class has two labels, so it equals macro here
	// (derived).
	near(t, "weighted F1", m.Weighted(f).V, 0.2667, 1e-4)
}

// MCC, derived by hand from its definition and cross-checked between the
// binary and multiclass formulas: TP=2 FP=1 TN=3 FN=1 gives
// (6-1)/sqrt(3*3*4*4) = 5/12.
func TestMCC(t *testing.T) {
	label := u8(1, 1, 1, 0, 0, 0, 0)
	pred := u8(1, 1, 0, 1, 0, 0, 0)
	b := BinaryConfusion(label, pred, nil)
	near(t, "binary MCC", b.MCC().V, 5.0/12, 1e-12)
	m := MulticlassConfusion(2, i32(1, 1, 1, 0, 0, 0, 0), i32(1, 1, 0, 1, 0, 0, 0), nil)
	near(t, "multiclass MCC", m.MCC().V, 5.0/12, 1e-12)
	if v := BinaryConfusion(u8(1, 1), u8(1, 1), nil).MCC(); v.Defined() {
		t.Errorf("MCC with one class: %v", v)
	}
}

// Source: scikit-learn documentation, roc_auc_score example:
// y=[0,0,1,1], score=[0.1,0.4,0.35,0.8] gives 0.75. Cross-checked against
// gonum's stat.ROC with integrate.Trapezoidal.
func TestROCAUCReference(t *testing.T) {
	y := u8(0, 0, 1, 1)
	s := []float64{0.1, 0.4, 0.35, 0.8}
	near(t, "ROC AUC", ROCAUC(y, s, Order(s), nil).V, 0.75, 1e-12)

	// gonum: scores sorted ascending with their classes.
	order := Order(s)
	sorted, classes := make([]float64, len(s)), make([]bool, len(s))
	for i, r := range order {
		sorted[i], classes[i] = s[r], y[r] == 1
	}
	tpr, fpr, _ := stat.ROC(nil, sorted, classes, nil)
	near(t, "ROC AUC (gonum)", integrate.Trapezoidal(fpr, tpr), 0.75, 1e-12)
}

// Ties count half; weights act as repeated rows.
func TestROCAUCTiesAndWeights(t *testing.T) {
	y := u8(0, 1, 0, 1)
	s := []float64{0.5, 0.5, 0.2, 0.9}
	// Pairs: (0.9 vs 0.5) 1, (0.9 vs 0.2) 1, (0.5 vs 0.5) 1/2, (0.5 vs 0.2) 1.
	near(t, "AUC with a tie", ROCAUC(y, s, Order(s), nil).V, 3.5/4, 1e-12)
	w := []float64{2, 1, 1, 1}
	yy := u8(0, 0, 1, 0, 1)
	ss := []float64{0.5, 0.5, 0.5, 0.2, 0.9}
	near(t, "weights as repeated rows", ROCAUC(y, s, Order(s), w).V, ROCAUC(yy, ss, Order(ss), nil).V, 1e-12)
	if v := ROCAUC(u8(1, 1), []float64{0.1, 0.2}, Order([]float64{0.1, 0.2}), nil); v.Defined() {
		t.Error("AUC with one class is defined")
	}
}

// Average precision of the roc_auc_score example data, derived by hand
// from the definition (sum over thresholds of the recall step times the
// precision): 0.5*1 + 0.5*2/3 = 0.8333 (the scikit-learn documentation's
// average_precision_score example gives 0.83, a value from memory).
func TestAveragePrecision(t *testing.T) {
	y := u8(0, 0, 1, 1)
	s := []float64{0.1, 0.4, 0.35, 0.8}
	near(t, "average precision", AveragePrecision(y, s, Order(s), nil).V, 0.5+0.5*2.0/3, 1e-12)
}

// Source: scikit-learn documentation, log_loss example: y=[spam, ham, ham,
// spam] with P(ham, spam) = [[.1,.9],[.9,.1],[.8,.2],[.35,.65]] gives
// 0.21616. Here spam is the positive class.
func TestLogLossReference(t *testing.T) {
	near(t, "log loss", LogLoss(u8(1, 0, 0, 1), []float64{0.9, 0.1, 0.2, 0.65}, nil).V, 0.21616, 1e-5)
}

// Brier score, derived: ((0.9-1)^2 + 0.1^2 + 0.2^2 + (0.65-1)^2)/4.
func TestBrier(t *testing.T) {
	near(t, "Brier", Brier(u8(1, 0, 0, 1), []float64{0.9, 0.1, 0.2, 0.65}, nil).V, (0.01+0.01+0.04+0.1225)/4, 1e-12)
}

// Source: scikit-learn documentation, r2_score and mean_squared_error
// examples: y=[3,-0.5,2,7], pred=[2.5,0,2,8]: R2 0.9486081370449679, RMSE
// 0.6123724356957945; MSE 0.375 and MAE 0.5 derived.
func TestRegressionReference(t *testing.T) {
	y := []float64{3, -0.5, 2, 7}
	p := []float64{2.5, 0, 2, 8}
	near(t, "R2", R2(y, p, nil).V, 0.9486081370449679, 1e-12)
	near(t, "RMSE", RMSE(y, p, nil).V, 0.6123724356957945, 1e-12)
	near(t, "MSE", MSE(y, p, nil).V, 0.375, 1e-12)
	near(t, "MAE", MAE(y, p, nil).V, 0.5, 1e-12)
	// MAPE derived: (0.5/3 + 0.5/0.5 + 0 + 1/7)/4.
	near(t, "MAPE", MAPE(y, p, nil).V, (0.5/3+1+1.0/7)/4, 1e-12)
	if v := MAPE([]float64{0, 1}, []float64{1, 1}, nil); v.Defined() {
		t.Error("MAPE with a zero label is defined")
	}
	if v := R2([]float64{2, 2}, []float64{1, 3}, nil); v.Defined() {
		t.Error("R2 of a constant label is defined")
	}
}

// Source: R mcnemar.test, values reproduced in statsmodels' nonparametric
// test suite: [[101,121],[59,33]] corrected 20.67222, p=5.450095e-06;
// uncorrected 21.35556, p=3.815136e-06. [[101,70],[59,33]] corrected
// 0.7751938, p=0.3786151; uncorrected 0.9379845, p=0.3327967; exact binomial
// p=0.378688. Exact: [[101,30],[60,33]] p=0.00206; [[101,10],[10,33]] p=1.0.
func TestMcNemarReference(t *testing.T) {
	x, p := McNemarChiSquare(121, 59, true)
	near(t, "corrected statistic", x, 20.67222, 1e-5)
	near(t, "corrected p", p, 5.450095e-06, 1e-11)
	x, p = McNemarChiSquare(121, 59, false)
	near(t, "uncorrected statistic", x, 21.35556, 1e-5)
	near(t, "uncorrected p", p, 3.815136e-06, 1e-11)
	x, p = McNemarChiSquare(70, 59, true)
	near(t, "corrected statistic", x, 0.7751938, 1e-7)
	near(t, "corrected p", p, 0.3786151, 1e-7)
	x, p = McNemarChiSquare(70, 59, false)
	near(t, "uncorrected statistic", x, 0.9379845, 1e-7)
	near(t, "uncorrected p", p, 0.3327967, 1e-7)

	// The test picks chi-square for large discordant counts...
	r := McNemarTest(121, 59)
	if r.Exact || math.Abs(r.PValue-5.450095e-06) > 1e-11 {
		t.Errorf("McNemarTest(121, 59) = %+v", r)
	}
	// ...and the exact binomial for small ones (computed here with the
	// exact test whatever the count, to check it against R).
	exact := func(b, c int64) float64 {
		n := b + c
		return math.Min(1, 2*binomCDF(min(b, c), n))
	}
	near(t, "exact p (70, 59)", exact(70, 59), 0.378688, 1e-6)
	near(t, "exact p (30, 60)", exact(30, 60), 0.00206, 1e-5)
	r = McNemarTest(10, 10)
	if !r.Exact || r.PValue != 1 {
		t.Errorf("McNemarTest(10, 10) = %+v, want exact p=1", r)
	}
}

// binomCDF is P(X <= k) for X ~ Binomial(n, 1/2), summed directly: an
// independent route from gonum's incomplete-beta one used by McNemarTest.
func binomCDF(k, n int64) float64 {
	s, c := 0.0, 1.0
	for i := int64(0); i <= k; i++ {
		if i > 0 {
			c = c * float64(n-i+1) / float64(i)
		}
		s += c
	}
	return s / math.Pow(2, float64(n))
}

func TestMcNemarExactMatchesDirectSum(t *testing.T) {
	for _, bc := range [][2]int64{{3, 9}, {0, 7}, {11, 12}, {5, 1}} {
		r := McNemarTest(bc[0], bc[1])
		want := math.Min(1, 2*binomCDF(min(bc[0], bc[1]), bc[0]+bc[1]))
		near(t, "exact p", r.PValue, want, 1e-12)
	}
}

// Source: R package binom, binom.confint, as stored in statsmodels'
// proportion test results: x=4, n=20, 95%: [0.0806576625797981,
// 0.4160174322518935].
func TestWilsonReference(t *testing.T) {
	lo, hi := Wilson(4, 20, 0.95)
	near(t, "Wilson low", lo, 0.0806576625797981, 1e-12)
	near(t, "Wilson high", hi, 0.4160174322518935, 1e-12)
}

// Derived by hand from DeLong, DeLong and Clarke-Pearson (1988), Biometrics
// 44:837-845: labels [0,0,0,1,1,1], A=[.2,.3,.4,.5,.2,.9],
// B=[.2,.4,.3,.2,.5,.4]: AUC_A=13/18, AUC_B=2/3, var_A=26/324,
// var_B=24/324, cov=-13.5/324, z=1/sqrt(77)=0.113961, p=0.9093. Checked also
// against the naive O(n^2) implementation of the same formulas.
func TestDeLongReference(t *testing.T) {
	y := u8(0, 0, 0, 1, 1, 1)
	a := []float64{.2, .3, .4, .5, .2, .9}
	b := []float64{.2, .4, .3, .2, .5, .4}
	d, ok := DeLongTest(y, a, b, 0.95)
	if !ok {
		t.Fatal("not computed")
	}
	near(t, "AUC A", d.AUCA, 13.0/18, 1e-12)
	near(t, "AUC B", d.AUCB, 2.0/3, 1e-12)
	near(t, "var A", d.VarA, 26.0/324, 1e-12)
	near(t, "var B", d.VarB, 24.0/324, 1e-12)
	near(t, "cov", d.Cov, -13.5/324, 1e-12)
	near(t, "z", d.Z, 1/math.Sqrt(77), 1e-9)
	near(t, "p", d.PValue, 0.9093, 1e-4)
	n := naiveDeLong(y, a, b)
	near(t, "naive var A", n.VarA, d.VarA, 1e-12)
	near(t, "naive cov", n.Cov, d.Cov, 1e-12)
}

// naiveDeLong computes DeLong's structural components directly from their
// definition, every positive against every negative: O(n^2).
func naiveDeLong(label []uint8, a, b []float64) DeLong {
	var pos, neg []int
	for i, l := range label {
		if l == 1 {
			pos = append(pos, i)
		} else {
			neg = append(neg, i)
		}
	}
	psi := func(x, y float64) float64 {
		switch {
		case x > y:
			return 1
		case x == y:
			return 0.5
		}
		return 0
	}
	comp := func(s []float64) ([]float64, []float64, float64) {
		v10, v01 := make([]float64, len(pos)), make([]float64, len(neg))
		auc := 0.0
		for i, p := range pos {
			for j, q := range neg {
				k := psi(s[p], s[q])
				v10[i] += k / float64(len(neg))
				v01[j] += k / float64(len(pos))
				auc += k
			}
		}
		return v10, v01, auc / float64(len(pos)*len(neg))
	}
	a10, a01, aa := comp(a)
	b10, b01, ab := comp(b)
	cov := func(u, v []float64) float64 {
		return stat.Covariance(u, v, nil)
	}
	m, n := float64(len(pos)), float64(len(neg))
	d := DeLong{AUCA: aa, AUCB: ab,
		VarA: cov(a10, a10)/m + cov(a01, a01)/n,
		VarB: cov(b10, b10)/m + cov(b01, b01)/n,
		Cov:  cov(a10, b10)/m + cov(a01, b01)/n}
	d.Z = (aa - ab) / math.Sqrt(d.VarA+d.VarB-2*d.Cov)
	return d
}

// Source: R package multtest, as stored in statsmodels' multiple-testing
// tests: p=[.001,.002,.003,.004,.005,.05,.06,.07,.08,.09].
func TestMultipleTestingReference(t *testing.T) {
	p := []float64{.001, .002, .003, .004, .005, .05, .06, .07, .08, .09}
	want := map[string][]float64{
		"Bonferroni": {.01, .02, .03, .04, .05, .5, .6, .7, .8, .9},
		"Holm":       {.01, .018, .024, .028, .03, .25, .25, .25, .25, .25},
		"BH":         {.01, .01, .01, .01, .01, .083333, .085714, .0875, .088889, .09},
	}
	got := map[string][]float64{"Bonferroni": Bonferroni(p), "Holm": Holm(p), "BH": BenjaminiHochberg(p)}
	for name, w := range want {
		for i := range w {
			near(t, name, got[name][i], w[i], 1e-6)
		}
	}
	// Unsorted input keeps its order.
	shuffled := []float64{.09, .001, .05}
	h := Holm(shuffled)
	near(t, "Holm unsorted", h[1], .003, 1e-12)
	near(t, "Holm unsorted", h[2], .1, 1e-12)
	near(t, "Holm unsorted", h[0], .1, 1e-12)
}
