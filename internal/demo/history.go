package demo

import (
	"math"
	"time"

	"plumbline.dev/plumbline/internal/promserver"
)

// The demo's synthetic monitoring history for Larkspur Parcels, backfilled
// into a real Prometheus. Every number is invented for the story:
//
//   - the late-delivery model's ROC AUC holds near 0.82 until the Fenwick
//     depot opens on Tuesday at 02:00, then falls to about 0.74, and is
//     back at 0.83 once the retrained model serves (Tuesday 13:30); the
//     hourly figure the guard watches falls to 0.70 while Wednesday's
//     candidate serves (12:05 to 13:00);
//   - the depot feature's PSI jumps from 0.04 to 0.41 when the depot opens
//     (the inputs drifted), the distance feature's stays at 0.05;
//   - the address feed breaks on Tuesday from 07:00 to 10:30: a fifth of
//     parcels lose their address confidence;
//   - 8% of 24,000 daily deliveries are late, 15% while the model is stale;
//   - about 4,000 deliveries a day get their on-time label, and the scan
//     feed reports in every couple of minutes.
var (
	historyStart = time.Date(2026, 10, 25, 0, 0, 0, 0, time.UTC)
	historyEnd   = time.Date(2026, 11, 5, 0, 0, 0, 0, time.UTC)
	depotOpens   = time.Date(2026, 11, 3, 2, 0, 0, 0, time.UTC)
	feedBreaks   = time.Date(2026, 11, 3, 7, 0, 0, 0, time.UTC)
	feedFixed    = time.Date(2026, 11, 3, 10, 30, 0, 0, time.UTC)
	// The retrained model goes live on Tuesday at 13:20 in the story; from
	// 13:30 the monitored quality is back.
	recovered = time.Date(2026, 11, 3, 13, 30, 0, 0, time.UTC)
	// Wednesday's candidate goes live at 12:00 and does badly in production
	// from 12:05 until the line has rolled back (13:00).
	badCandidate = time.Date(2026, 11, 4, 12, 5, 0, 0, time.UTC)
	rolledBack   = time.Date(2026, 11, 4, 13, 0, 0, 0, time.UTC)
	// storyStart is the demo clock's first reading: Monday morning.
	storyStart = time.Date(2026, 11, 2, 9, 30, 0, 0, time.UTC)
)

const historyStep = 2 * time.Minute

func history() []promserver.Series {
	type gen struct {
		name   string
		labels map[string]string
		f      func(t time.Time) float64
	}
	wobble := func(t time.Time, period, amp float64) float64 { return amp * math.Sin(float64(t.Unix())/period) }
	days := func(t time.Time) float64 { return t.Sub(historyStart).Hours() / 24 }
	gens := []gen{
		{"larkspur_late_risk_roc_auc", map[string]string{"window": "24h"}, func(t time.Time) float64 {
			switch {
			case t.Before(depotOpens):
				return 0.82 + wobble(t, 3100, 0.01)
			case t.Before(recovered):
				return 0.74 + wobble(t, 2900, 0.01)
			}
			return 0.83 + wobble(t, 3100, 0.01)
		}},
		{"larkspur_late_risk_roc_auc", map[string]string{"window": "1h"}, func(t time.Time) float64 {
			switch {
			case t.Before(depotOpens):
				return 0.82 + wobble(t, 700, 0.02)
			case t.Before(recovered):
				return 0.74 + wobble(t, 700, 0.02)
			case !t.Before(badCandidate) && t.Before(rolledBack):
				return 0.70 + wobble(t, 700, 0.01)
			}
			return 0.83 + wobble(t, 700, 0.02)
		}},
		{"larkspur_feature_psi", map[string]string{"feature": "depot"}, func(t time.Time) float64 {
			if t.Before(depotOpens) {
				return 0.04
			}
			return 0.41
		}},
		{"larkspur_feature_psi", map[string]string{"feature": "distance_km"}, func(time.Time) float64 { return 0.05 }},
		{"larkspur_feature_missing_ratio", map[string]string{"feature": "address_confidence"}, func(t time.Time) float64 {
			if !t.Before(feedBreaks) && t.Before(feedFixed) {
				return 0.22
			}
			return 0.01
		}},
		{"larkspur_scan_feed_last_success_timestamp_seconds", nil, func(t time.Time) float64 { return float64(t.Add(-90 * time.Second).Unix()) }},
		{"larkspur_labelled_deliveries_total", nil, func(t time.Time) float64 { return math.Floor(4000 * days(t)) }},
		{"larkspur_deliveries_total", nil, func(t time.Time) float64 { return math.Floor(24000 * days(t)) }},
		{"larkspur_deliveries_late_total", nil, func(t time.Time) float64 {
			// 8% of deliveries are late, 15% while the model is stale.
			perDay := func(from, to time.Time, share float64) float64 {
				if to.Before(from) {
					return 0
				}
				return share * 24000 * to.Sub(from).Hours() / 24
			}
			clamp := func(a, b time.Time) time.Time {
				if a.Before(b) {
					return a
				}
				return b
			}
			late := perDay(historyStart, clamp(t, depotOpens), 0.08) +
				perDay(depotOpens, clamp(t, recovered), 0.15) +
				perDay(recovered, t, 0.08)
			return math.Floor(late)
		}},
	}
	var out []promserver.Series
	for _, g := range gens {
		s := promserver.Series{Name: g.name, Labels: g.labels}
		for t := historyStart; t.Before(historyEnd); t = t.Add(historyStep) {
			s.Samples = append(s.Samples, promserver.Sample{T: t, V: g.f(t)})
		}
		out = append(out, s)
	}
	return out
}
