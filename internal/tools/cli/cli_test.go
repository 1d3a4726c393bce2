package cli

import (
	"bytes"
	"errors"
	"flag"
	"strings"
	"testing"
)

func testSet(w *bytes.Buffer) *flag.FlagSet {
	fs := NewFlagSet(Command{Name: "plumbline try", Synopsis: "--input FILE [flags]", Summary: "Try a thing.",
		Examples: []string{"# the usual way", "plumbline try --input golden.csv"}}, w)
	fs.String("input", "", "the `FILE` to read (required)")
	fs.String("task", "binary", "binary or regression")
	fs.Float64("confidence", 0.95, "confidence (default from PLUMBLINE_X, else 0.95)")
	fs.Int("resamples", 1000, "resamples")
	fs.Bool("quiet", false, "say less")
	return fs
}

func TestHelpShowsDoubleDashFlagsExamplesAndEachDefaultOnce(t *testing.T) {
	var w bytes.Buffer
	fs := testSet(&w)
	if err := Parse(fs, []string{"--help"}, 0); !errors.Is(err, flag.ErrHelp) {
		t.Fatalf("--help gave %v", err)
	}
	out := w.String()
	for _, want := range []string{
		"Try a thing.", "Usage:\n  plumbline try --input FILE [flags]", "Examples:\n  # the usual way\n  plumbline try --input golden.csv",
		"--input FILE", `--task string`, `binary or regression (default "binary")`, "--resamples int", "resamples (default 1000)",
		"--quiet ", "confidence (default from PLUMBLINE_X, else 0.95)\n",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("help lacks %q:\n%s", want, out)
		}
	}
	if strings.Contains(out, "\n  -input") || strings.Count(out, "(default") != 3 {
		t.Errorf("a single-dash flag or a default printed twice:\n%s", out)
	}
}

func TestUsageErrors(t *testing.T) {
	cases := []struct {
		args []string
		want string
	}{
		{[]string{"--nope"}, "flag provided but not defined: -nope"},
		{[]string{"--resamples", "many"}, `invalid value "many" for flag -resamples`},
		{[]string{"--input", "a.csv", "extra"}, `error: unexpected argument "extra"`},
	}
	for _, c := range cases {
		var w bytes.Buffer
		fs := testSet(&w)
		if err := Parse(fs, c.args, 0); !errors.Is(err, ErrUsage) {
			t.Errorf("%v: got %v, want ErrUsage", c.args, err)
		}
		if out := w.String(); !strings.Contains(out, c.want) || !strings.Contains(out, "Run 'plumbline try --help' for usage.") {
			t.Errorf("%v: stderr %q lacks %q and the pointer to --help", c.args, out, c.want)
		}
	}
	var w bytes.Buffer
	fs := testSet(&w)
	if err := Parse(fs, nil, 0); err != nil {
		t.Fatal(err)
	}
	if err := Required(fs, "input"); !errors.Is(err, ErrUsage) || !strings.Contains(w.String(), "error: --input is required") {
		t.Errorf("missing --input: %v, %q", err, w.String())
	}
}
