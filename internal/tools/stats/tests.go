package stats

import (
	"math"
	"sort"

	"gonum.org/v1/gonum/stat/distuv"
)

// Regression metrics, each over weighted rows.

// MAE is the mean absolute error.
func MAE(y, pred, w []float64) Value {
	var s, n float64
	for i := range y {
		wi := weight(w, i)
		s += wi * math.Abs(y[i]-pred[i])
		n += wi
	}
	if n == 0 {
		return undefined("no rows")
	}
	return defined(s / n)
}

// MSE is the mean squared error.
func MSE(y, pred, w []float64) Value {
	var s, n float64
	for i := range y {
		d := y[i] - pred[i]
		wi := weight(w, i)
		s += wi * d * d
		n += wi
	}
	if n == 0 {
		return undefined("no rows")
	}
	return defined(s / n)
}

// RMSE is the square root of the MSE.
func RMSE(y, pred, w []float64) Value {
	m := MSE(y, pred, w)
	if !m.Defined() {
		return m
	}
	return defined(math.Sqrt(m.V))
}

// MAPE is the mean absolute error relative to the label, as a fraction
// (0.1 is 10%). It is undefined when a label is 0.
func MAPE(y, pred, w []float64) Value {
	var s, n float64
	zeros := 0
	for i := range y {
		wi := weight(w, i)
		if wi == 0 {
			continue
		}
		if y[i] == 0 {
			zeros++
			continue
		}
		s += wi * math.Abs((y[i]-pred[i])/y[i])
		n += wi
	}
	switch {
	case zeros > 0:
		return undefined("the label is 0 in some rows")
	case n == 0:
		return undefined("no rows")
	}
	return defined(s / n)
}

// R2 is the coefficient of determination: 1 - SSres / SStot.
func R2(y, pred, w []float64) Value {
	var n, sy float64
	for i := range y {
		wi := weight(w, i)
		n += wi
		sy += wi * y[i]
	}
	if n == 0 {
		return undefined("no rows")
	}
	mean := sy / n
	var res, tot float64
	for i := range y {
		wi := weight(w, i)
		d := y[i] - pred[i]
		res += wi * d * d
		e := y[i] - mean
		tot += wi * e * e
	}
	if tot == 0 {
		return undefined("the label does not vary")
	}
	return defined(1 - res/tot)
}

// McNemar is McNemar's test on paired right/wrong outcomes. B counts rows
// the candidate got right and the baseline wrong, C the reverse.
type McNemar struct {
	B, C      int64
	Statistic float64
	PValue    float64
	// Exact says the p-value is the exact binomial one; otherwise it is the
	// chi-square with continuity correction.
	Exact bool
}

// McNemarExactBelow is the discordant count under which the exact test is
// used: the chi-square approximation is poor for small counts (common
// practice puts the line at 25).
const McNemarExactBelow = 25

// McNemarTest runs McNemar's test: exact binomial when b+c is small, else
// chi-square with continuity correction.
func McNemarTest(b, c int64) McNemar {
	r := McNemar{B: b, C: c}
	n := b + c
	if n == 0 {
		r.PValue, r.Exact = 1, true
		return r
	}
	if n < McNemarExactBelow {
		r.Exact = true
		r.Statistic = float64(min(b, c))
		r.PValue = math.Min(1, 2*distuv.Binomial{N: float64(n), P: 0.5}.CDF(float64(min(b, c))))
		return r
	}
	d := math.Abs(float64(b-c)) - 1
	r.Statistic = d * d / float64(n)
	r.PValue = ChiSquareSurvival(r.Statistic, 1)
	return r
}

// McNemarChiSquare is the chi-square statistic and p-value, with or without
// the continuity correction.
func McNemarChiSquare(b, c int64, corrected bool) (float64, float64) {
	d := math.Abs(float64(b - c))
	if corrected {
		d--
	}
	x := d * d / float64(b+c)
	return x, ChiSquareSurvival(x, 1)
}

// Wilson is the Wilson score interval for a proportion of x in n at the
// given confidence.
func Wilson(x, n, confidence float64) (lo, hi float64) {
	if n == 0 {
		return math.NaN(), math.NaN()
	}
	z := NormalQuantile(1 - (1-confidence)/2)
	p := x / n
	z2 := z * z
	centre := (p + z2/(2*n)) / (1 + z2/n)
	half := z / (1 + z2/n) * math.Sqrt(p*(1-p)/n+z2/(4*n*n))
	return centre - half, centre + half
}

// DeLong is DeLong's test of two correlated ROC AUCs on the same rows.
type DeLong struct {
	AUCA, AUCB float64
	VarA, VarB float64
	Cov        float64
	Z, PValue  float64
	// Low and High bound AUCA - AUCB at the confidence asked.
	Low, High float64
}

// DeLongTest compares the AUCs of scores a and b on the same labelled rows
// with the fast algorithm of Sun and Xu (2014): midranks give every
// structural component in O(n log n).
func DeLongTest(label []uint8, a, b []float64, confidence float64) (DeLong, bool) {
	return DeLongTestSorted(label, a, b, Order(a), Order(b), confidence)
}

// classMidranks returns, for each row, its midrank among all rows and its
// midrank among the rows of its own class, from the rows' order by score.
func classMidranks(label []uint8, score []float64, order []int32) (all, own []float64) {
	all, own = make([]float64, len(score)), make([]float64, len(score))
	var seen [2]int // rows of each class before the current tie group
	for i := 0; i < len(order); {
		j := i
		var cnt [2]int
		for j < len(order) && score[order[j]] == score[order[i]] {
			cnt[label[order[j]]]++
			j++
		}
		mid := float64(i+j+1) / 2
		var midOwn [2]float64
		for c := 0; c < 2; c++ {
			midOwn[c] = float64(2*seen[c]+cnt[c]+1) / 2
		}
		for k := i; k < j; k++ {
			r := order[k]
			all[r], own[r] = mid, midOwn[label[r]]
		}
		seen[0] += cnt[0]
		seen[1] += cnt[1]
		i = j
	}
	return all, own
}

// DeLongTestSorted is DeLongTest with the rows' orders by each score given.
func DeLongTestSorted(label []uint8, a, b []float64, orderA, orderB []int32, confidence float64) (DeLong, bool) {
	var posIdx, negIdx []int
	for i, l := range label {
		if l == 1 {
			posIdx = append(posIdx, i)
		} else {
			negIdx = append(negIdx, i)
		}
	}
	m, n := len(posIdx), len(negIdx)
	if m < 2 || n < 2 {
		return DeLong{}, false
	}
	comp := func(s []float64, order []int32) (v10, v01 []float64, auc float64) {
		tz, own := classMidranks(label, s, order)
		v10, v01 = make([]float64, m), make([]float64, n)
		for i, r := range posIdx {
			v10[i] = (tz[r] - own[r]) / float64(n)
			auc += v10[i]
		}
		for j, r := range negIdx {
			v01[j] = 1 - (tz[r]-own[r])/float64(m)
		}
		return v10, v01, auc / float64(m)
	}
	a10, a01, aucA := comp(a, orderA)
	b10, b01, aucB := comp(b, orderB)
	cov := func(u, v []float64) float64 {
		var mu, mv float64
		for i := range u {
			mu += u[i]
			mv += v[i]
		}
		mu /= float64(len(u))
		mv /= float64(len(v))
		s := 0.0
		for i := range u {
			s += (u[i] - mu) * (v[i] - mv)
		}
		return s / float64(len(u)-1)
	}
	d := DeLong{AUCA: aucA, AUCB: aucB}
	d.VarA = cov(a10, a10)/float64(m) + cov(a01, a01)/float64(n)
	d.VarB = cov(b10, b10)/float64(m) + cov(b01, b01)/float64(n)
	d.Cov = cov(a10, b10)/float64(m) + cov(a01, b01)/float64(n)
	v := d.VarA + d.VarB - 2*d.Cov
	diff := aucA - aucB
	if v <= 0 {
		// The two scores rank every pair alike: no variance in the
		// difference.
		d.Z, d.PValue, d.Low, d.High = 0, 1, diff, diff
		if diff != 0 {
			d.Z, d.PValue = math.Copysign(math.Inf(1), diff), 0
		}
		return d, true
	}
	se := math.Sqrt(v)
	d.Z = diff / se
	d.PValue = NormalTwoSidedP(d.Z)
	z := NormalQuantile(1 - (1-confidence)/2)
	d.Low, d.High = diff-z*se, diff+z*se
	return d, true
}

// Holm adjusts p-values with Holm's step-down method.
func Holm(p []float64) []float64 {
	n := len(p)
	idx := sortedIndex(p)
	out := make([]float64, n)
	running := 0.0
	for rank, i := range idx {
		adj := math.Min(1, float64(n-rank)*p[i])
		running = math.Max(running, adj)
		out[i] = running
	}
	return out
}

// Bonferroni adjusts p-values by the number of tests.
func Bonferroni(p []float64) []float64 {
	out := make([]float64, len(p))
	for i, v := range p {
		out[i] = math.Min(1, v*float64(len(p)))
	}
	return out
}

// BenjaminiHochberg adjusts p-values to control the false discovery rate.
func BenjaminiHochberg(p []float64) []float64 {
	n := len(p)
	idx := sortedIndex(p)
	out := make([]float64, n)
	running := 1.0
	for rank := n - 1; rank >= 0; rank-- {
		i := idx[rank]
		adj := math.Min(1, p[i]*float64(n)/float64(rank+1))
		running = math.Min(running, adj)
		out[i] = running
	}
	return out
}

func sortedIndex(p []float64) []int {
	idx := make([]int, len(p))
	for i := range idx {
		idx[i] = i
	}
	sort.SliceStable(idx, func(a, b int) bool { return p[idx[a]] < p[idx[b]] })
	return idx
}
