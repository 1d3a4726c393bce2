package demo

import (
	"bufio"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"strconv"
	"time"
)

// The two programs the demo's Jobs run (as `plumbline demo train` and
// `plumbline demo score`), standing in for a team's own trainer and golden-set
// scorer. They read what the controller injects into every Job container
// (PLUMBLINE_DATA_FROM/TO, PLUMBLINE_ARTIFACT_URI, PLUMBLINE_CANDIDATE_URI,
// PLUMBLINE_BASELINE_URI) and the demo's world file for the synthetic parcels.

// ErrUsage marks a flag error whose message is already printed.
var ErrUsage = errors.New("usage")

func parse(fs *flag.FlagSet, args []string, stderr io.Writer) error {
	fs.SetOutput(stderr)
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return err
		}
		return ErrUsage
	}
	if fs.NArg() > 0 {
		fmt.Fprintf(stderr, "unexpected arguments: %v\n", fs.Args())
		return ErrUsage
	}
	return nil
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
	uri := os.Getenv("PLUMBLINE_ARTIFACT_URI")
	if uri == "" {
		return errors.New("PLUMBLINE_ARTIFACT_URI is not set: the controller sets it in every training container")
	}
	from, ok, err := envTime("PLUMBLINE_DATA_FROM")
	if err != nil {
		return err
	}
	if !ok {
		from = w.Phases[0].At // no earlier training: all of the history
	}
	to, ok, err := envTime("PLUMBLINE_DATA_TO")
	if err != nil {
		return err
	}
	if !ok {
		to = time.Now()
	}
	if *recent > 0 && to.Sub(from) > *recent {
		from = to.Add(-*recent)
	}
	if !to.After(from) {
		return fmt.Errorf("the data window %s to %s is empty", from.Format(time.RFC3339), to.Format(time.RFC3339))
	}
	n := int(to.Sub(from).Seconds() * *rate)
	n = max(500, min(n, *maxRows))
	parcels := w.Sample(from, to, n, seedOf(os.Getenv("PLUMBLINE_VERSION")+"/train"))
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
	candURI := os.Getenv("PLUMBLINE_CANDIDATE_URI")
	if candURI == "" {
		return errors.New("PLUMBLINE_CANDIDATE_URI is not set: the controller sets it in every evaluation container")
	}
	cand, err := ReadArtifact(candURI)
	if err != nil {
		return err
	}
	base := cand
	if u := os.Getenv("PLUMBLINE_BASELINE_URI"); u != "" {
		if base, err = ReadArtifact(u); err != nil {
			return err
		}
	}
	// The golden set: the last half-minute's labelled parcels (the last few
	// days', in the story's time).
	now := time.Now()
	parcels := w.Sample(now.Add(-30*time.Second), now, *rows, seedOf(os.Getenv("PLUMBLINE_VERSION")+"/golden"))
	f, err := os.Create(*out)
	if err != nil {
		return fmt.Errorf("--out: %w", err)
	}
	bw := bufio.NewWriter(f)
	fmt.Fprintln(bw, "parcel_id,depot,was_late,candidate_score,baseline_score")
	for _, p := range parcels {
		late := 0
		if p.Late {
			late = 1
		}
		fmt.Fprintf(bw, "%s,%s,%d,%s,%s\n", p.ID, p.Depot, late,
			strconv.FormatFloat(cand.Score(p), 'f', 6, 64), strconv.FormatFloat(base.Score(p), 'f', 6, 64))
	}
	if err := bw.Flush(); err != nil {
		f.Close()
		return fmt.Errorf("write %s: %w", *out, err)
	}
	if err := f.Close(); err != nil {
		return fmt.Errorf("write %s: %w", *out, err)
	}
	fmt.Fprintf(stdout, "scored %d golden-set parcels (%s) with %s and %s; wrote %s\n", len(parcels),
		w.PhaseAt(now).Note, candURI, os.Getenv("PLUMBLINE_BASELINE_URI"), *out)
	return nil
}
