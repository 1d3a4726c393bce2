package main

import (
	"bytes"
	"context"
	"strings"
	"testing"
)

func TestRunCommands(t *testing.T) {
	cases := []struct {
		args       []string
		code       int
		wantOut    string
		wantStderr string
	}{
		{nil, 0, "Usage: plumbline <command>", ""},
		{[]string{"help"}, 0, "manager", ""},
		{[]string{"version"}, 0, "dev", ""},
		{[]string{"train-everything"}, 2, "", `unknown command "train-everything"`},
		{[]string{"manager", "--no-such-flag"}, 2, "", "flag provided but not defined: -no-such-flag"},
		{[]string{"manager", "stray"}, 2, "", `unexpected argument "stray"`},
		// A flag's value the command refuses is a usage error too.
		{[]string{"manager", "--prometheus-url=prometheus:9090"}, 2, "", "want an http(s) URL"},
		{[]string{"manager", "-h"}, 0, "", "--prometheus-url string"},
		{[]string{"demo", "-h"}, 0, "", "--assets string"},
		{[]string{"kubectl"}, 0, "kubectl plumbline <command> [options]", ""},
		{[]string{"kubectl", "approve"}, 2, "", "error: approve takes VERSION"},
		{[]string{"kubectl", "status", "--kubeconfig", "no-such-kubeconfig"}, 1, "", "kubectl plumbline status: load the kubeconfig"},
		{[]string{"demo", "train", "--no-such-flag"}, 2, "", "flag provided but not defined: -no-such-flag"},
		{[]string{"demo", "score", "--rows", "5"}, 1, "", "--rows=5: a golden set needs at least 100 parcels"},
		{[]string{"demo", "train", "--world", "no-such.json"}, 1, "", "read world"},
		{[]string{"datacheck", "--current", "x.csv"}, 2, "", "--reference is required"},
		{[]string{"datacheck", "--reference", "no-such.csv", "--current", "x.csv"}, 1, "", "--reference: open no-such.csv"},
		{[]string{"backtest", "--history", "h.csv"}, 2, "", "give policies to compare"},
		{[]string{"backtest", "--history", "no-such.csv", "--target", "0.8", "--schedule", "@weekly"}, 1, "", "--history"},
		{[]string{"backtest", "staleness", "--history", "h.csv"}, 2, "", "--trained-at is required"},
	}
	for _, tc := range cases {
		var out, errOut bytes.Buffer
		code := run(context.Background(), tc.args, &out, &errOut)
		if code != tc.code {
			t.Errorf("%v: exit %d, want %d (stderr %q)", tc.args, code, tc.code, errOut.String())
		}
		if !strings.Contains(out.String(), tc.wantOut) {
			t.Errorf("%v: stdout %q lacks %q", tc.args, out.String(), tc.wantOut)
		}
		if !strings.Contains(errOut.String(), tc.wantStderr) {
			t.Errorf("%v: stderr %q lacks %q", tc.args, errOut.String(), tc.wantStderr)
		}
	}
}

// Every command's help shows its flags as --flag, a usage line and an
// example, each default once; every usage error points at --help and
// exits 2.
func TestEveryCommandsHelp(t *testing.T) {
	for _, args := range [][]string{
		{"manager"}, {"demo"}, {"evaluate"}, {"datacheck"}, {"backtest"}, {"backtest", "staleness"},
		{"demo", "train"}, {"demo", "score"}, {"demo", "extract"},
	} {
		var out, errOut bytes.Buffer
		if code := run(context.Background(), append(append([]string{}, args...), "--help"), &out, &errOut); code != 0 {
			t.Errorf("%v --help: exit %d", args, code)
		}
		help := errOut.String()
		name := "plumbline " + strings.Join(args, " ")
		for _, want := range []string{"Usage:\n  " + name, "Flags:\n  --"} {
			if !strings.Contains(help, want) {
				t.Errorf("%s --help lacks %q:\n%s", name, want, help)
			}
		}
		if len(args) == 1 || args[0] == "backtest" {
			if !strings.Contains(help, "Examples:\n  ") {
				t.Errorf("%s --help has no example:\n%s", name, help)
			}
		}
		for _, l := range strings.Split(help, "\n") {
			if strings.HasPrefix(strings.TrimSpace(l), "-") && !strings.HasPrefix(strings.TrimSpace(l), "--") {
				t.Errorf("%s --help shows a single-dash flag: %q", name, l)
			}
			if strings.Count(l, "(default") > 1 {
				t.Errorf("%s --help prints a default twice: %q", name, l)
			}
		}
		errOut.Reset()
		if code := run(context.Background(), append(append([]string{}, args...), "--no-such-flag"), &out, &errOut); code != 2 ||
			!strings.Contains(errOut.String(), "Run '"+name+" --help' for usage.") {
			t.Errorf("%v --no-such-flag: exit %d, stderr %q", args, code, errOut.String())
		}
	}
}
