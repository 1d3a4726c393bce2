package demo

import (
	"encoding/json"

	"plumbline.dev/plumbline/internal/gatereport"
)

// The demo's evaluation reports. The numbers are invented for the story (a
// candidate better everywhere; one whose recall drops on the harbour depot);
// plumbline evaluate computes such reports from a golden set.

func num(v float64) *float64 { return &v }

func metric(name, segment string, cand, base, lo, hi float64) gatereport.Metric {
	return gatereport.Metric{Metric: name, Segment: segment, Candidate: num(cand), Baseline: num(base), Delta: num(cand - base),
		DeltaLow: num(lo), DeltaHigh: num(hi), Confidence: num(0.95), Test: "bootstrap", N: 2500}
}

func report(harbourRecall, harbourLow float64) string {
	r := gatereport.Report{
		Schema: gatereport.Schema, Rows: 5000,
		Metrics: []gatereport.Metric{
			metric("roc_auc", "", 0.846, 0.812, 0.021, 0.047),
			metric("log_loss", "", 0.391, 0.428, -0.05, -0.024),
			metric("recall", "", 0.77, 0.71, 0.041, 0.079),
			metric("recall", "fenwick-depot", 0.74, 0.52, 0.17, 0.27),
			metric("recall", "harbour-depot", harbourRecall, 0.75, harbourLow, harbourLow+0.03),
			metric("recall", "north-depot", 0.78, 0.77, -0.008, 0.028),
		},
		MustPass: gatereport.MustPass{Total: 40},
	}
	b, err := json.Marshal(r)
	if err != nil {
		panic(err) // a fixed struct of numbers always encodes
	}
	return string(b)
}

func goodReport() string { return report(0.76, -0.012) }

func harbourRegressionReport() string { return report(0.69, -0.083) }
