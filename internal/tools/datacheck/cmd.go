package datacheck

import (
	"fmt"
	"io"
	"math"
	"os"
	"strconv"
	"strings"

	"plumbline.dev/plumbline/internal/contract/termination"
	"plumbline.dev/plumbline/internal/tools/cli"
	"plumbline.dev/plumbline/internal/tools/outfile"
)

// ErrUsage marks bad flags, already explained on stderr.
var ErrUsage = cli.ErrUsage

// command is datacheck's help.
var command = cli.Command{
	Name:     "plumbline datacheck",
	Synopsis: "--reference FILE --current FILE [flags]",
	Summary: "Check a current batch of data against a reference batch: quality (missing values, type errors, out-of-range\n" +
		"values, unseen categories, duplicates, malformed rows) blocks a retrain; drift (KS, chi-square, PSI, with the\n" +
		"Benjamini-Hochberg correction) is reported with the weight of the features that moved.",
	Examples: []string{
		"# infer a schema from the reference, to review and keep",
		"plumbline datacheck --reference train.csv --id parcel_id --write-schema schema.yaml",
		"# check this week's batch with it",
		"plumbline datacheck --reference train.csv --current week48.csv --schema schema.yaml --weights depot=3 --out check.json",
	},
}

// Command runs plumbline datacheck. It returns ErrUsage for bad flags, an
// *InputError for input that cannot be checked, and nil when the check ran,
// whatever it found.
func Command(args []string, stdout, stderr io.Writer) error {
	fs := cli.NewFlagSet(command, stderr)
	o := DefaultOptions()
	var schemaFile, writeSchema, out, termFile, weights string
	fs.StringVar(&o.Reference, "reference", "", "the reference batch, the data the live model learned from: CSV with a header, JSON Lines or Parquet (required)")
	fs.StringVar(&o.Current, "current", "", "the current batch to check (required unless only --write-schema)")
	fs.StringVar(&o.Format, "format", "", "csv, jsonl or parquet for both files (default: from each file's extension)")
	fs.StringVar(&schemaFile, "schema", "", "schema file (YAML or JSON): column types, bounds, categories, required columns (default: inferred from the reference)")
	fs.StringVar(&writeSchema, "write-schema", "", "write the schema used (inferred, or given with categories filled in) here, to review and keep")
	fs.StringVar(&o.ID, "id", "", "column of a row id: duplicate ids are a finding (default: the schema's id)")
	fs.StringVar(&out, "out", "", "write the full JSON report here")
	fs.StringVar(&termFile, "termination-file", termination.Default(), "write the compact check report here (default /dev/termination-log when it exists)")
	fs.Float64Var(&o.Alpha, "alpha", o.Alpha, "level of the drift tests after the Benjamini-Hochberg correction")
	fs.Float64Var(&o.PSIThreshold, "psi-threshold", o.PSIThreshold, "PSI a feature must reach as well to count as drifted (common practice: 0.1 a moderate shift, 0.25 a large one)")
	fs.Float64Var(&o.DriftedWeightLimit, "drifted-weight-limit", o.DriftedWeightLimit, "the dataset has drifted when the drifted features carry at least this part of the features' weight (see --weights)")
	fs.StringVar(&weights, "weights", "", "feature weights in the drifted weight, such as depot=3,distance_km=2 (default 1 each)")
	fs.IntVar(&o.SampleSize, "sample-size", o.SampleSize, "values kept per numeric column and batch for KS, Wasserstein-1 and PSI")
	fs.IntVar(&o.Bins, "bins", o.Bins, "reference-quantile bins of the numeric PSI")
	fs.Uint64Var(&o.Seed, "seed", o.Seed, "seed of the sampling")
	fs.IntVar(&o.Workers, "workers", 0, "columns read in parallel (default: one worker per CPU)")
	fs.Float64Var(&o.Limits.MissingIncrease, "max-missing-increase", o.Limits.MissingIncrease, "share of missing values a column may have above the reference's")
	fs.Float64Var(&o.Limits.TypeErrors, "max-type-errors", o.Limits.TypeErrors, "share of rows whose value in a numeric column is not a number")
	fs.Float64Var(&o.Limits.OutOfRange, "max-out-of-range", o.Limits.OutOfRange, "share of rows out of a numeric column's bounds")
	fs.Float64Var(&o.Limits.Unseen, "max-unseen", o.Limits.Unseen, "share of rows with a category the reference never had")
	fs.Float64Var(&o.Limits.DuplicateRows, "max-duplicate-rows", o.Limits.DuplicateRows, "share of rows repeating an earlier row exactly")
	fs.Float64Var(&o.Limits.DuplicateIDs, "max-duplicate-ids", o.Limits.DuplicateIDs, "share of rows repeating an earlier row's id")
	fs.Float64Var(&o.Limits.MalformedRows, "max-malformed-rows", o.Limits.MalformedRows, "share of rows that are malformed (wrong field count, bad quoting, bad JSON)")
	fs.Int64Var(&o.Limits.MinRows, "min-rows", o.Limits.MinRows, "fewest rows the current batch may have")
	if err := cli.Parse(fs, args, 0); err != nil {
		return err
	}
	usage := func(format string, args ...any) error { return cli.Usagef(fs, format, args...) }
	for _, l := range []struct {
		name string
		v    float64
	}{{"max-missing-increase", o.Limits.MissingIncrease}, {"max-type-errors", o.Limits.TypeErrors}, {"max-out-of-range", o.Limits.OutOfRange},
		{"max-unseen", o.Limits.Unseen}, {"max-duplicate-rows", o.Limits.DuplicateRows}, {"max-duplicate-ids", o.Limits.DuplicateIDs},
		{"max-malformed-rows", o.Limits.MalformedRows}} {
		if !(l.v >= 0 && l.v <= 1) {
			return usage("--%s %v: want a share from 0 to 1, such as 0.01", l.name, l.v)
		}
	}
	switch {
	case o.Reference == "":
		return usage("--reference is required")
	case o.Current == "" && writeSchema == "":
		return usage("--current is required (or give only --write-schema to infer a schema from the reference)")
	case !(o.Alpha > 0 && o.Alpha < 1):
		return usage("--alpha %v: want a level strictly between 0 and 1, such as 0.05", o.Alpha)
	case !(o.PSIThreshold >= 0) || math.IsInf(o.PSIThreshold, 0):
		return usage("--psi-threshold %v: want 0 or more, such as 0.1", o.PSIThreshold)
	case !(o.DriftedWeightLimit > 0 && o.DriftedWeightLimit <= 1):
		return usage("--drifted-weight-limit %v: want a part of the whole above 0 and at most 1, such as 0.25", o.DriftedWeightLimit)
	case o.SampleSize < 1000:
		return usage("--sample-size %d: want at least 1000", o.SampleSize)
	case o.Bins < 2 || o.Bins > 100:
		return usage("--bins %d: want 2 to 100", o.Bins)
	case o.Workers < 0:
		return usage("--workers %d: want 0 (one per CPU) or more", o.Workers)
	case o.Limits.MinRows < 0:
		return usage("--min-rows %d: want 0 or more", o.Limits.MinRows)
	}
	w, err := ParseWeights(weights)
	if err != nil {
		return usage("--weights: %v", err)
	}
	o.Weights = w
	if schemaFile != "" {
		s, err := LoadSchema(schemaFile)
		if err != nil {
			return &InputError{Err: err}
		}
		o.Schema, o.SchemaFile = s, schemaFile
	}
	if o.Current == "" {
		res, err := readReference(o)
		if err != nil {
			return err
		}
		if err := res.schema.Write(writeSchema, o.Reference); err != nil {
			return err
		}
		fmt.Fprintf(stdout, "schema of %d columns from %s (%d rows) written to %s\n", len(res.schema.Columns), o.Reference, res.ref.rows, writeSchema)
		return nil
	}
	rep, err := Run(o)
	if err != nil {
		return err
	}
	if writeSchema != "" {
		if err := rep.Decided.Write(writeSchema, o.Reference); err != nil {
			return err
		}
	}
	if out != "" {
		if err := outfile.WriteJSON(out, "--out", rep); err != nil {
			return err
		}
	}
	if err := WriteTable(stdout, rep); err != nil {
		return err
	}
	if termFile != "" {
		b, compact, err := Compact(rep)
		if err != nil {
			return err
		}
		if err := os.WriteFile(termFile, b, 0o644); err != nil {
			return fmt.Errorf("--termination-file: %w", err)
		}
		note := ""
		if compact.Truncated {
			note = " (truncated to fit: some findings or features are only in the full report)"
		}
		fmt.Fprintf(stdout, "check report: %d bytes to %s%s\n", len(b), termFile, note)
	}
	return nil
}

// ParseWeights reads feature weights: name=weight, comma-separated.
func ParseWeights(s string) (map[string]float64, error) {
	out := map[string]float64{}
	for _, part := range strings.Split(s, ",") {
		part = strings.TrimSpace(part)
		if part == "" {
			continue
		}
		name, val, ok := strings.Cut(part, "=")
		name = strings.TrimSpace(name)
		if !ok || name == "" {
			return nil, fmt.Errorf("%q: want name=weight, such as depot=3", part)
		}
		w, err := strconv.ParseFloat(strings.TrimSpace(val), 64)
		if err != nil || w < 0 || math.IsInf(w, 0) || math.IsNaN(w) {
			return nil, fmt.Errorf("%q: the weight must be a number, 0 or more", part)
		}
		if _, dup := out[name]; dup {
			return nil, fmt.Errorf("%q is weighted twice", name)
		}
		out[name] = w
	}
	return out, nil
}
