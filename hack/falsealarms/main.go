// Command falsealarms prints how often a trigger fires on a healthy but
// noisy quality signal, how much of the time it cannot judge, and how long
// it takes to catch a real drop, for a range of windows and coverages. The
// signals are seeded and synthetic (see trigger.NoisySeries); the
// trade-off table in docs/retraining.md comes from this command:
//
//	go run ./hack/falsealarms
package main

import (
	"fmt"
	"os"
	"slices"
	"text/tabwriter"
	"time"

	"plumbline.dev/plumbline/internal/engine/trigger"
)

const (
	seeds = 5
	days  = 30
)

func month(seed uint64) trigger.NoisySeries {
	return trigger.NoisySeries{Seed: seed, Start: time.Date(2026, 10, 1, 0, 0, 0, 0, time.UTC), Step: time.Minute,
		Points: days * 24 * 60, Mean: 0.82, SD: 0.02, Rho: 0.95, GapRate: 0.002, MaxGap: 20}
}

func main() {
	below := 0.78
	th := trigger.Threshold{Below: &below}
	fmt.Println("Healthy signal: mean 0.82, sd 0.02, lag-one autocorrelation 0.95, one point a minute,")
	fmt.Println("0.2% of minutes start a gap of up to 20 minutes; threshold below 0.78 (two sd); judged every minute.")
	fmt.Printf("Drop: at a random time the mean falls by 0.08 (to 0.74). %d seeds x %d days each.\n\n", seeds, days)
	tw := tabwriter.NewWriter(os.Stdout, 0, 4, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "forSeconds\tcoverage\tfalse firings/day\tunknown\tdrop caught in 24h\tmedian delay\t")
	for _, f := range []time.Duration{5 * time.Minute, 15 * time.Minute, 30 * time.Minute, time.Hour, 3 * time.Hour, 6 * time.Hour} {
		for _, c := range []float64{0.5, 0.8, 1.0} {
			w := trigger.Window{For: f, Every: time.Minute, Coverage: c}
			firings, unknown := 0, 0.0
			var delays []time.Duration
			for seed := uint64(1); seed <= seeds; seed++ {
				evals := trigger.Replay(month(seed).Generate(), th, w)
				firings += trigger.Episodes(evals)
				unknown += trigger.UnknownShare(evals)

				d := month(seed + 100)
				d.Points = 4 * 24 * 60
				d.DropAt = d.Start.Add(time.Duration(36*60+int(seed)*97) * time.Minute)
				d.Drop = 0.08
				if at, ok := trigger.FirstFiring(trigger.Replay(d.Generate(), th, w), d.DropAt); ok && at.Sub(d.DropAt) <= 24*time.Hour {
					delays = append(delays, at.Sub(d.DropAt))
				}
			}
			median := "-"
			if len(delays) > 0 {
				slices.Sort(delays)
				median = delays[len(delays)/2].Round(time.Minute).String()
			}
			fmt.Fprintf(tw, "%d\t%.1f\t%.2f\t%.1f%%\t%d of %d\t%s\t\n", int(f.Seconds()), c,
				float64(firings)/float64(seeds*days), 100*unknown/seeds, len(delays), seeds, median)
		}
	}
	tw.Flush()
}
