package ctl

import (
	"bytes"
	"context"
	"errors"
	"flag"
	"slices"
	"strings"
	"testing"

	"k8s.io/client-go/rest"
)

// Flags go before, between or after the positional arguments, as with
// kubectl; "--" ends the flags.
func TestParseInterspersed(t *testing.T) {
	for _, c := range []struct {
		args []string
		pos  []string
		ns   string
	}{
		{[]string{"late-risk", "-n", "larkspur"}, []string{"late-risk"}, "larkspur"},
		{[]string{"-n", "larkspur", "late-risk"}, []string{"late-risk"}, "larkspur"},
		{[]string{"--namespace=larkspur", "a", "b"}, []string{"a", "b"}, "larkspur"},
		{[]string{"a", "--", "-n"}, []string{"a", "-n"}, ""},
	} {
		fs := flag.NewFlagSet("t", flag.ContinueOnError)
		var ns string
		fs.StringVar(&ns, "namespace", "", "")
		fs.StringVar(&ns, "n", "", "")
		pos, err := parseInterspersed(fs, c.args)
		if err != nil || !slices.Equal(pos, c.pos) || ns != c.ns {
			t.Errorf("%v: positional %v namespace %q (%v), want %v and %q", c.args, pos, ns, err, c.pos, c.ns)
		}
	}
}

// Usage errors are caught before any cluster is asked.
func TestRunUsage(t *testing.T) {
	noCluster := func(*opts) (*rest.Config, string, error) {
		return nil, "", errors.New("no cluster should be asked")
	}
	for _, c := range []struct {
		args []string
		err  error
		out  string
	}{
		{nil, nil, "Usage: kubectl plumbline <command>"},
		{[]string{"frobnicate"}, ErrUsage, `unknown command "frobnicate"`},
		{[]string{"approve"}, ErrUsage, "Usage: kubectl plumbline approve VERSION"},
		{[]string{"history", "a", "b"}, ErrUsage, "Usage: kubectl plumbline history LINE"},
		{[]string{"retrain", "late-risk", "--no-such-flag"}, ErrUsage, "flag provided but not defined"},
		{[]string{"status"}, errors.New("no cluster should be asked"), ""},
	} {
		var out bytes.Buffer
		err := Run(context.Background(), c.args, &out, &out, noCluster)
		if (err == nil) != (c.err == nil) || err != nil && !strings.Contains(err.Error(), c.err.Error()) {
			t.Errorf("%v: error %v, want %v", c.args, err, c.err)
		}
		if !strings.Contains(out.String(), c.out) {
			t.Errorf("%v: output %q lacks %q", c.args, out.String(), c.out)
		}
	}
}
