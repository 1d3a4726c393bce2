package backtest

import "math"

// CUSUM is a tabular cumulative-sum detector of a shift away from a target
// mean: the upper sum gathers excesses above target+K, the lower sum
// shortfalls below target-K, each floored at zero; a sum above H is an
// alarm.
type CUSUM struct {
	Target, K, H float64
	Upper, Lower float64
}

// Add takes one observation and reports whether either sum is above H.
func (c *CUSUM) Add(x float64) (upper, lower bool) {
	c.Upper = math.Max(0, x-(c.Target+c.K)+c.Upper)
	c.Lower = math.Max(0, (c.Target-c.K)-x+c.Lower)
	return c.Upper > c.H, c.Lower > c.H
}

// Reset starts both sums again, as after acting on an alarm.
func (c *CUSUM) Reset() { c.Upper, c.Lower = 0, 0 }
