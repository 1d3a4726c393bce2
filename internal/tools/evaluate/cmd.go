package evaluate

import (
	"fmt"
	"io"
	"os"
	"slices"
	"strings"

	"plumbline.dev/plumbline/internal/contract/jobenv"
	"plumbline.dev/plumbline/internal/contract/termination"
	"plumbline.dev/plumbline/internal/tools/cli"
	"plumbline.dev/plumbline/internal/tools/outfile"
	"plumbline.dev/plumbline/internal/tools/stats"
)

// The variables the controller sets on a gate Job, so the Job's template
// need not repeat the line's criteria: the metrics and segments the
// criteria judge, and the highest confidence they ask.
const (
	EnvGateMetrics    = jobenv.GateMetrics
	EnvGateSegments   = jobenv.GateSegments
	EnvGateConfidence = jobenv.GateConfidence
)

var defaultReportMetrics = map[string][]string{
	Binary:     {"roc_auc", "accuracy", "log_loss", "recall", "precision", "f1"},
	Multiclass: {"accuracy", "balanced_accuracy", "f1_macro"},
	Regression: {"rmse", "mae", "r2"},
}

// ErrUsage marks bad flags, already explained on stderr.
var ErrUsage = cli.ErrUsage

// command is evaluate's help.
var command = cli.Command{
	Name:     "plumbline evaluate",
	Synopsis: "--input FILE --label COL --candidate COL --baseline COL [flags]",
	Summary: "Measure a candidate against the live model on a golden set: each metric for both, the paired difference\n" +
		"with its confidence interval and p-value, per segment too, and the rows the candidate must get right.\n" +
		"It prints a table, writes the full JSON report (--out) and the compact gate report the controller reads.",
	Examples: []string{
		"# a binary model's scores, per depot, no worse than 0.005 ROC AUC below the live model",
		"plumbline evaluate --input golden.csv --label late --candidate cand_score --baseline live_score \\",
		"    --segment depot --max-regression 0.005 --out report.json",
	},
}

// Command runs plumbline evaluate. It returns ErrUsage for bad flags, an
// *InputError for bad input, and nil when the evaluation ran, whatever it
// found.
func Command(args []string, getenv func(string) string, stdout, stderr io.Writer) error {
	fs := cli.NewFlagSet(command, stderr)
	var (
		input, format, task, positive, out, termFile, reportMetrics, reportSegments string
		cols                                                                        Columns
		threshold, confidence, maxRegression                                        float64
		resamples, bootRows                                                         int
		seed                                                                        uint64
	)
	fs.StringVar(&input, "input", "", "golden-set predictions: CSV with a header, JSON Lines or Parquet (required)")
	fs.StringVar(&format, "format", "", "csv, jsonl or parquet (default: from the file's extension)")
	fs.StringVar(&task, "task", Binary, "binary, multiclass or regression")
	fs.StringVar(&cols.Label, "label", "", "column of the true label (required)")
	fs.StringVar(&cols.Candidate, "candidate", "", "column of the candidate's score, class or value (required)")
	fs.StringVar(&cols.Baseline, "baseline", "", "column of the live model's score, class or value (required)")
	fs.StringVar(&cols.ID, "id", "", "column of a row id, to name failed must-pass rows")
	fs.StringVar(&cols.Segment, "segment", "", "column of the segment (a depot, say): metrics per segment too")
	fs.StringVar(&cols.MustPass, "must-pass", "", "column flagging rows the candidate must get right (1/true)")
	fs.StringVar(&positive, "positive", "", "binary: the label value of the positive class when labels are not 1/0 or true/false")
	fs.Float64Var(&threshold, "threshold", 0.5, "binary: a score at or above this predicts the positive class")
	fs.Float64Var(&confidence, "confidence", envFloat(getenv(EnvGateConfidence), 0.95), "confidence of the intervals (default from "+EnvGateConfidence+", else 0.95)")
	fs.Float64Var(&maxRegression, "max-regression", 0, "largest loss against the baseline judged non-inferior")
	fs.IntVar(&resamples, "resamples", 1000, "paired bootstrap resamples")
	fs.IntVar(&bootRows, "bootstrap-rows", 20000, "groups larger than this are bootstrapped from a seeded subsample of this size (0: never)")
	fs.Uint64Var(&seed, "seed", 1, "seed of the bootstrap")
	fs.StringVar(&out, "out", "", "write the full JSON report here")
	fs.StringVar(&termFile, "termination-file", termination.Default(), "write the compact gate report here (default /dev/termination-log when it exists)")
	fs.StringVar(&reportMetrics, "report-metrics", getenv(EnvGateMetrics), "comma-separated metrics for the gate report (default from "+EnvGateMetrics+", else a few per task)")
	fs.StringVar(&reportSegments, "report-segments", envOr(getenv(EnvGateSegments), "*"), "segments for the gate report: * for all, none, or a comma-separated list (default from "+EnvGateSegments+")")
	if err := cli.Parse(fs, args, 0); err != nil {
		return err
	}
	if err := cli.Required(fs, "input", "label", "candidate", "baseline"); err != nil {
		return err
	}
	usage := func(format string, args ...any) error { return cli.Usagef(fs, format, args...) }
	switch {
	case task != Binary && task != Multiclass && task != Regression:
		return usage("--task %q: want binary, multiclass or regression", task)
	case !(confidence > 0.5 && confidence < 1):
		return usage("--confidence %v: want a level strictly between 0.5 and 1, such as 0.95", confidence)
	case maxRegression < 0:
		return usage("--max-regression %v: want 0 or more", maxRegression)
	case resamples < 100:
		return usage("--resamples %d: want at least 100", resamples)
	case bootRows < 0 || bootRows > 0 && bootRows < 1000:
		return usage("--bootstrap-rows %d: want 0 (never subsample) or at least 1000", bootRows)
	}
	sel := Selection{Metrics: split(reportMetrics)}
	if len(sel.Metrics) == 0 {
		sel.Metrics = defaultReportMetrics[task]
	}
	for _, m := range sel.Metrics {
		if !slices.Contains(metricNames[task], m) {
			return usage("--report-metrics: %q is not a %s metric; choose from %s", m, task, strings.Join(metricNames[task], ", "))
		}
	}
	switch reportSegments {
	case "*":
		sel.All = true
	case "none", "":
	default:
		sel.Segments = split(reportSegments)
	}

	ds, err := Load(input, format, task, cols, positive)
	if err != nil {
		return err
	}
	s := Settings{Threshold: threshold, Confidence: confidence, MaxRegression: maxRegression,
		Bootstrap: stats.Bootstrap{Resamples: resamples, Seed: seed, MaxRows: bootRows}}
	groups := Evaluate(ds, s)
	rep := Build(input, ds, s, groups, MustPassFailures(ds, s))
	if out != "" {
		if err := outfile.WriteJSON(out, "--out", rep); err != nil {
			return err
		}
	}
	table := WriteTable
	if cli.IsSet(fs, "max-regression") {
		table = WriteTableWithVerdicts
	}
	if err := table(stdout, rep); err != nil {
		return err
	}
	if termFile != "" {
		b, compact, err := Compact(rep, sel)
		if err != nil {
			return err
		}
		if err := os.WriteFile(termFile, b, 0o644); err != nil {
			return fmt.Errorf("--termination-file: %w", err)
		}
		note := ""
		if compact.Truncated {
			note = " (truncated to fit: fewer metrics or segments with --report-metrics and --report-segments keep it whole)"
		}
		fmt.Fprintf(stdout, "gate report: %d bytes, %d rows, to %s%s\n", len(b), len(compact.Metrics), termFile, note)
	}
	return nil
}

func envFloat(s string, def float64) float64 {
	var f float64
	if _, err := fmt.Sscan(s, &f); err == nil {
		return f
	}
	return def
}

func envOr(s, def string) string {
	if s == "" {
		return def
	}
	return s
}

func split(s string) []string {
	var out []string
	for _, p := range strings.Split(s, ",") {
		if p = strings.TrimSpace(p); p != "" {
			out = append(out, p)
		}
	}
	return out
}
