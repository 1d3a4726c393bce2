package demo

import (
	"bufio"
	"errors"
	"flag"
	"fmt"
	"io"
	"math"
	"os"
	"strconv"
	"time"

	"plumbline.dev/plumbline/internal/contract/jobenv"
	"plumbline.dev/plumbline/internal/tools/cli"
)

// The programs the demo's Jobs run (as `plumbline demo train`, `plumbline
// demo score` and `plumbline demo extract`), standing in for a team's own
// trainer, golden-set scorer and data export. They read what the controller
// injects into Job containers (PLUMBLINE_DATA_FROM/TO,
// PLUMBLINE_REFERENCE_FROM/TO, PLUMBLINE_ARTIFACT_URI, PLUMBLINE_CANDIDATE_URI,
// PLUMBLINE_BASELINE_URI) and the demo's world file for the synthetic parcels.

// ErrUsage marks a flag error whose message is already printed.
var ErrUsage = cli.ErrUsage

// parse parses a Job program's flags; its help is that of cli.
func parse(fs *flag.FlagSet, args []string, stderr io.Writer) error {
	fs.SetOutput(stderr)
	c := cli.Command{Name: fs.Name(), Synopsis: "[flags]", Summary: "A program of the demo's Jobs; the controller gives it its data window in PLUMBLINE_* variables."}
	fs.Usage = func() { cli.Help(stderr, c, fs) }
	return cli.Parse(fs, args, 0)
}

func envTime(name string) (time.Time, bool, error) {
	v := os.Getenv(name)
	if v == "" {
		return time.Time{}, false, nil
	}
	t, err := time.Parse(time.RFC3339, v)
	if err != nil {
		return time.Time{}, false, fmt.Errorf("%s=%q: want an RFC 3339 time: %w", name, v, err)
	}
	return t, true, nil
}

// window reads a data window from two variables: an empty start is the
// world's beginning (all history), an empty end is now; recent keeps only
// the window's latest part.
func window(w *World, fromVar, toVar string, recent time.Duration) (time.Time, time.Time, error) {
	from, ok, err := envTime(fromVar)
	if err != nil {
		return from, from, err
	}
	if !ok {
		from = w.Phases[0].At
	}
	to, ok, err := envTime(toVar)
	if err != nil {
		return from, to, err
	}
	if !ok {
		to = time.Now()
	}
	if recent > 0 && to.Sub(from) > recent {
		from = to.Add(-recent)
	}
	if !to.After(from) {
		return from, to, fmt.Errorf("the data window %s to %s (%s, %s) is empty", from.Format(time.RFC3339), to.Format(time.RFC3339), fromVar, toVar)
	}
	return from, to, nil
}

// rows is how many parcels a window holds at a rate, within bounds.
func rows(from, to time.Time, rate float64, most int) int {
	return max(500, min(int(to.Sub(from).Seconds()*rate), most))
}

// Train is `plumbline demo train`: it draws the parcels of the data window
// from the world and fits the late-delivery model on them.
func Train(args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("plumbline demo train", flag.ContinueOnError)
	world := fs.String("world", "world.json", "the demo's world file")
	rate := fs.Float64("parcels-per-second", 150, "labelled parcels per second of the data window (time is compressed)")
	maxRows := fs.Int("max-rows", 20000, "most parcels to train on")
	recent := fs.Duration("recent", 0, "train on at most this much of the window's latest data (0: all of it), as trainers that keep to recent weeks do")
	if err := parse(fs, args, stderr); err != nil {
		return err
	}
	w, err := LoadWorld(*world)
	if err != nil {
		return err
	}
	uri := os.Getenv(jobenv.ArtifactURI)
	if uri == "" {
		return errors.New("PLUMBLINE_ARTIFACT_URI is not set: the controller sets it in every training container")
	}
	from, to, err := window(w, jobenv.DataFrom, jobenv.DataTo, *recent)
	if err != nil {
		return err
	}
	n := rows(from, to, *rate, *maxRows)
	parcels := w.Sample(from, to, n, seedOf(os.Getenv(jobenv.Version)+"/train"))
	m, err := TrainModel(parcels)
	if err != nil {
		return err
	}
	m.DataFrom, m.DataTo = from.UTC(), to.UTC()
	if err := WriteArtifact(uri, m); err != nil {
		return err
	}
	fmt.Fprintf(stdout, "trained a logistic regression on %d synthetic parcels from %s to %s; wrote %s\n",
		n, from.Format(time.RFC3339), to.Format(time.RFC3339), uri)
	return nil
}

// Score is `plumbline demo score`: it draws a golden set of recently
// labelled parcels from the world and writes both models' scores on it, for
// plumbline evaluate to measure.
func Score(args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("plumbline demo score", flag.ContinueOnError)
	world := fs.String("world", "world.json", "the demo's world file")
	rows := fs.Int("rows", 4000, "parcels in the golden set")
	out := fs.String("out", "predictions.csv", "where to write the predictions (CSV)")
	if err := parse(fs, args, stderr); err != nil {
		return err
	}
	if *rows < 100 {
		return fmt.Errorf("--rows=%d: a golden set needs at least 100 parcels", *rows)
	}
	w, err := LoadWorld(*world)
	if err != nil {
		return err
	}
	candURI := os.Getenv(jobenv.CandidateURI)
	if candURI == "" {
		return errors.New("PLUMBLINE_CANDIDATE_URI is not set: the controller sets it in every evaluation container")
	}
	cand, err := ReadArtifact(candURI)
	if err != nil {
		return err
	}
	base := cand
	if u := os.Getenv(jobenv.BaselineURI); u != "" {
		if base, err = ReadArtifact(u); err != nil {
			return err
		}
	}
	// The golden set: the last half-minute's labelled parcels (the last few
	// days', in the story's time).
	now := time.Now()
	parcels := w.Sample(now.Add(-30*time.Second), now, *rows, seedOf(os.Getenv(jobenv.Version)+"/golden"))
	err = writeCSV(*out, "parcel_id,depot,was_late,candidate_score,baseline_score", func(w io.Writer) {
		for _, p := range parcels {
			late := 0
			if p.Late {
				late = 1
			}
			fmt.Fprintf(w, "%s,%s,%d,%s,%s\n", p.ID, p.Depot, late,
				strconv.FormatFloat(cand.Score(p), 'f', 6, 64), strconv.FormatFloat(base.Score(p), 'f', 6, 64))
		}
	})
	if err != nil {
		return fmt.Errorf("--out: %w", err)
	}
	fmt.Fprintf(stdout, "scored %d golden-set parcels (%s) with %s and %s; wrote %s\n", len(parcels),
		w.PhaseAt(now).Note, candURI, os.Getenv(jobenv.BaselineURI), *out)
	return nil
}

// Extract is `plumbline demo extract`: it exports two batches of parcels
// from the world as CSV, for plumbline datacheck: the reference (the window
// the live version learned from, PLUMBLINE_REFERENCE_FROM/TO; empty: the
// world's first phase, which the imported model learned from) and the
// current batch (the window a retrain would train on, PLUMBLINE_DATA_FROM/TO).
func Extract(args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("plumbline demo extract", flag.ContinueOnError)
	world := fs.String("world", "world.json", "the demo's world file")
	rate := fs.Float64("parcels-per-second", 150, "labelled parcels per second of a window (time is compressed)")
	recent := fs.Duration("recent", 0, "keep only this much of each window's latest data (0: all of it), as the trainer does")
	refOut := fs.String("reference", "reference.csv", "where to write the reference batch")
	curOut := fs.String("current", "current.csv", "where to write the current batch")
	if err := parse(fs, args, stderr); err != nil {
		return err
	}
	w, err := LoadWorld(*world)
	if err != nil {
		return err
	}
	refFrom, refTo, err := window(w, jobenv.ReferenceFrom, jobenv.ReferenceTo, *recent)
	if os.Getenv(jobenv.ReferenceTo) == "" {
		// No window recorded (an imported version): what it learned from.
		refFrom, refTo, err = w.Phases[0].At, w.Phases[0].At.Add(time.Minute), nil
		if len(w.Phases) > 1 && w.Phases[1].At.Before(refTo) {
			refTo = w.Phases[1].At
		}
	}
	if err != nil {
		return err
	}
	curFrom, curTo, err := window(w, jobenv.DataFrom, jobenv.DataTo, *recent)
	if err != nil {
		return err
	}
	for _, b := range []struct {
		path     string
		from, to time.Time
		seed     string
	}{{*refOut, refFrom, refTo, "/reference"}, {*curOut, curFrom, curTo, "/current"}} {
		parcels := w.Sample(b.from, b.to, rows(b.from, b.to, *rate, 50000), seedOf(os.Getenv(jobenv.Line)+b.seed+b.to.String()))
		if err := writeBatch(b.path, parcels); err != nil {
			return fmt.Errorf("export a batch: %w", err)
		}
		fmt.Fprintf(stdout, "wrote %d parcels from %s to %s to %s\n", len(parcels), b.from.Format(time.RFC3339), b.to.Format(time.RFC3339), b.path)
	}
	return nil
}

// writeBatch writes parcels' features as CSV; a missing address
// confidence is an empty field.
func writeBatch(path string, parcels []Parcel) error {
	return writeCSV(path, "parcel_id,depot,distance_km,weight_kg,address_confidence", func(w io.Writer) {
		for _, p := range parcels {
			addr := ""
			if !math.IsNaN(p.Address) {
				addr = strconv.FormatFloat(p.Address, 'f', 4, 64)
			}
			fmt.Fprintf(w, "%s,%s,%s,%s,%s\n", p.ID, p.Depot, strconv.FormatFloat(p.Distance, 'f', 3, 64),
				strconv.FormatFloat(p.Weight, 'f', 3, 64), addr)
		}
	})
}

// writeCSV writes a header and the rows that rows writes to a file,
// buffered; the error of any write shows at the flush.
func writeCSV(path, header string, rows func(w io.Writer)) error {
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	bw := bufio.NewWriter(f)
	fmt.Fprintln(bw, header)
	rows(bw)
	if err := bw.Flush(); err != nil {
		f.Close()
		return fmt.Errorf("write %s: %w", path, err)
	}
	if err := f.Close(); err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	return nil
}
