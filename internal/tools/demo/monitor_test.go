package demo

import (
	"math"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	dto "github.com/prometheus/client_model/go"
)

// value reads a gauge's or a counter's value.
func value(t *testing.T, c prometheus.Metric) float64 {
	t.Helper()
	var m dto.Metric
	if err := c.Write(&m); err != nil {
		t.Fatal(err)
	}
	if m.Gauge != nil {
		return m.Gauge.GetValue()
	}
	return m.Counter.GetValue()
}

// The inputs are known when a parcel is scored, its outcome labelDelay
// later: the input gauges move at once, quality and the labelled count only
// when the outcomes come in.
func TestMonitorLabelDelay(t *testing.T) {
	w := &World{Seed: 7, Phases: []Phase{{At: time.Date(2026, 11, 2, 0, 0, 0, 0, time.UTC), Note: "ordinary traffic"}}}
	m := newMonitor(referenceOf(w), 100, 10*time.Second, "test")
	t0 := time.Date(2026, 11, 2, 9, 0, 0, 0, time.UTC)
	batch := func(missing bool) []scored {
		var b []scored
		for i := range 50 {
			b = append(b, scored{score: float64(i) / 50, late: i%2 == 0, missing: missing, depot: "Fenwick", weight: 30})
		}
		return b
	}
	m.addAt(batch(true), t0)
	if got := value(t, m.missing); got != 1 {
		t.Errorf("missing share at once: %v, want 1", got)
	}
	if got := value(t, m.labelled); got != 0 {
		t.Errorf("labelled before the outcomes are in: %v", got)
	}
	if !math.IsNaN(m.currentAUC()) {
		t.Errorf("quality before any outcome: %v", m.currentAUC())
	}
	m.addAt(batch(false), t0.Add(9*time.Second))
	if got := value(t, m.labelled); got != 0 {
		t.Errorf("labelled 9 s after: %v", got)
	}
	if got := value(t, m.missing); got != 0.5 {
		t.Errorf("missing share of the last 100 scored: %v, want 0.5", got)
	}
	m.addAt(nil, t0.Add(10*time.Second))
	if got := value(t, m.labelled); got != 50 {
		t.Errorf("labelled 10 s after the first batch: %v, want 50", got)
	}
	if math.IsNaN(m.currentAUC()) {
		t.Error("no quality once the first outcomes are in")
	}
}
