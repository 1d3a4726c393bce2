// Command larkspur-history writes a synthetic quality history for the
// backtest example of docs/backtest.md: 120 days of the daily ROC AUC of Larkspur
// Parcels' late-delivery model (a fictional courier; every number is made
// up), one point every 15 minutes, with a cumulative count of labelled
// deliveries. The model goes stale slowly, the new Fenwick depot opens on
// day 50 and costs it a step, and the signal wobbles as such signals do.
// There are no retrains in it: it is the model trained on day 0, left alone.
//
//	go run ./hack/larkspur-history > history.csv
//	go run ./hack/larkspur-history --staleness > batches.csv
package main

import (
	"bufio"
	"flag"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"time"
)

func main() {
	staleness := flag.Bool("staleness", false, "write daily per-batch quality of one model instead (time,value), for backtest staleness")
	flag.Parse()
	w := bufio.NewWriter(os.Stdout)
	defer w.Flush()
	start := time.Date(2026, 6, 1, 0, 0, 0, 0, time.UTC)
	rng := rand.New(rand.NewPCG(2026, 6))
	if *staleness {
		fmt.Fprintln(w, "time,value")
		for d := 0; d < 45; d++ {
			age := float64(d)
			v := 0.845 * math.Exp(-0.0021*age) * (1 + 0.004*rng.NormFloat64())
			fmt.Fprintf(w, "%s,%.4f\n", start.Add(time.Duration(d)*24*time.Hour+12*time.Hour).Format(time.RFC3339), v)
		}
		return
	}
	fmt.Fprintln(w, "time,value,labelled_rows")
	const step = 15 * time.Minute
	depot := start.Add(50 * 24 * time.Hour)
	noise, labelled := 0.0, 0.0
	for t := start; t.Before(start.Add(120 * 24 * time.Hour)); t = t.Add(step) {
		age := t.Sub(start).Hours() / 24
		v := 0.845 - 0.0011*age
		if !t.Before(depot) {
			v -= 0.04
		}
		// A slowly wandering wobble (AR(1), lag-one correlation 0.98 at
		// this step, standard deviation about 0.006) and a daily cycle.
		noise = 0.98*noise + 0.006*math.Sqrt(1-0.98*0.98)*rng.NormFloat64()
		v += noise + 0.003*math.Sin(2*math.Pi*t.Sub(start).Hours()/24)
		labelled += 60 + 20*rng.Float64() // about 6,700 labelled deliveries a day
		fmt.Fprintf(w, "%s,%.4f,%.0f\n", t.Format(time.RFC3339), v, labelled)
	}
}
