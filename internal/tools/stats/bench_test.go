package stats

import (
	"math/rand/v2"
	"testing"
	"time"
)

// BenchmarkDeLong: the O(n log n) DeLong of Sun and Xu against naiveDeLong,
// the O(n^2) computation of the same components from their definition, on
// 20,000 rows. Reports both times and their ratio.
//
//	go test ./internal/stats -run '^$' -bench DeLong -benchtime 1x
func BenchmarkDeLong(b *testing.B) {
	rng := rand.New(rand.NewPCG(3, 4))
	n := 20_000
	label := make([]uint8, n)
	a, c := make([]float64, n), make([]float64, n)
	for i := range label {
		if rng.Float64() < 0.3 {
			label[i] = 1
		}
		a[i] = rng.NormFloat64() + float64(label[i])
		c[i] = 0.6*a[i] + 0.8*rng.NormFloat64()
	}
	b.ResetTimer()
	start := time.Now()
	for i := 0; i < b.N; i++ {
		if _, ok := DeLongTest(label, a, c, 0.95); !ok {
			b.Fatal("not computed")
		}
	}
	fast := time.Since(start) / time.Duration(b.N)
	b.StopTimer()
	start = time.Now()
	naiveDeLong(label, a, c)
	slow := time.Since(start)
	b.ReportMetric(float64(fast.Microseconds())/1000, "fast-ms")
	b.ReportMetric(float64(slow.Microseconds())/1000, "naive-ms")
	b.ReportMetric(float64(slow)/float64(fast), "naive/fast")
}
