// Package stats holds the statistics plumbline evaluate and datacheck use:
// classification and regression metrics (weighted, so a bootstrap resample
// is a vector of row counts), paired tests (McNemar, DeLong, the paired
// bootstrap), Wilson intervals and corrections for testing many hypotheses.
// Every function is pure; the tests check each against published values.
package stats

import (
	"math"

	"gonum.org/v1/gonum/stat/distuv"
)

// Value is a metric's value, or why it cannot be computed.
type Value struct {
	V         float64
	Undefined string
}

// Defined reports whether the value is a number.
func (v Value) Defined() bool { return v.Undefined == "" }

func undefined(why string) Value { return Value{V: math.NaN(), Undefined: why} }

func defined(v float64) Value { return Value{V: v} }

// weight is w[i], or 1 when w is nil.
func weight(w []float64, i int) float64 {
	if w == nil {
		return 1
	}
	return w[i]
}

// NormalQuantile is the standard normal quantile function.
func NormalQuantile(p float64) float64 { return distuv.UnitNormal.Quantile(p) }

// NormalTwoSidedP is the two-sided p-value of a standard normal statistic.
func NormalTwoSidedP(z float64) float64 {
	return 2 * distuv.UnitNormal.Survival(math.Abs(z))
}

// ChiSquareSurvival is P(X > x) for X chi-square with df degrees of freedom.
func ChiSquareSurvival(x, df float64) float64 {
	return distuv.ChiSquared{K: df}.Survival(x)
}
