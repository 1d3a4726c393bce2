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
		{[]string{"manager", "stray"}, 2, "", "unexpected arguments: stray"},
		{[]string{"manager", "--prometheus-url=prometheus:9090"}, 1, "", "want an http(s) URL"},
		{[]string{"manager", "-h"}, 0, "", "-prometheus-url"},
		{[]string{"demo", "-h"}, 0, "", "-assets"},
		{[]string{"kubectl"}, 0, "Usage: kubectl plumbline <command>", ""},
		{[]string{"kubectl", "approve"}, 2, "", "Usage: kubectl plumbline approve VERSION"},
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
