package demo

import (
	"bytes"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"

	"github.com/parquet-go/parquet-go"

	"plumbline.dev/plumbline/internal/evaluate"
)

// prediction is a row of what Larkspur's scorer writes on the golden set
// (the gate Job's first container): both models' late-delivery scores for
// parcels whose outcome is known. All synthetic.
type prediction struct {
	ParcelID  string  `parquet:"parcel_id"`
	Depot     string  `parquet:"depot"`
	WasLate   int64   `parquet:"was_late"`
	Candidate float64 `parquet:"candidate_score"`
	Baseline  float64 `parquet:"baseline_score"`
	MustPass  bool    `parquet:"must_pass"`
}

// writePredictions writes a synthetic golden set of 8,000 parcels over
// four depots: the candidate separates late parcels better than the live
// model, except, with harbourDrop, at the harbour depot, where it misses
// many late parcels.
func writePredictions(path string, seed uint64, harbourDrop bool) error {
	rng := rand.New(rand.NewPCG(seed, 99))
	depots := []string{"north", "harbour", "fenwick", "lakeside"}
	rows := make([]prediction, 0, 8000)
	for i := 0; i < 8000; i++ {
		depot := depots[i%len(depots)]
		late := rng.Float64() < 0.3
		y := 0.0
		if late {
			y = 1
		}
		zc := rng.NormFloat64() + 2.6*y - 1.8
		zb := rng.NormFloat64() + 1.5*y - 1.2
		if harbourDrop && depot == "harbour" && late {
			zc -= 1.6
		}
		c, b := 1/(1+math.Exp(-zc)), 1/(1+math.Exp(-zb))
		// Parcels the team insists on: clear cases the candidate gets right.
		must := i%200 == 0 && (c >= 0.5) == late && math.Abs(c-0.5) > 0.3
		rows = append(rows, prediction{fmt.Sprintf("LK-%05d", i), depot, int64(y), c, b, must})
	}
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	w := parquet.NewGenericWriter[prediction](f)
	if _, err := w.Write(rows); err != nil {
		f.Close()
		return err
	}
	if err := w.Close(); err != nil {
		f.Close()
		return err
	}
	return f.Close()
}

// evaluateWith runs plumbline evaluate as the gate Job's last container
// would, reading the predictions file in place of the Job's --input, and
// returns its termination message and the table it printed.
func evaluateWith(dir, predictions string, args []string, env map[string]string) (string, string, error) {
	if len(args) == 0 || args[0] != "evaluate" {
		return "", "", fmt.Errorf("the gate Job's last container does not run plumbline evaluate: %v", args)
	}
	term := filepath.Join(dir, "termination-log")
	var run []string
	for _, a := range args[1:] {
		if strings.HasPrefix(a, "--input=") {
			a = "--input=" + predictions
		}
		run = append(run, a)
	}
	run = append(run, "--termination-file", term)
	var stdout, stderr bytes.Buffer
	if err := evaluate.Command(run, func(k string) string { return env[k] }, &stdout, &stderr); err != nil {
		return "", stdout.String(), fmt.Errorf("%v: %s", err, stderr.String())
	}
	b, err := os.ReadFile(term)
	return string(b), stdout.String(), err
}
