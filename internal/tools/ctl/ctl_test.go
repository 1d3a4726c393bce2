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

// Usage errors are caught before any cluster is asked, told kubectl's way
// with a pointer to the command's help.
func TestRunUsage(t *testing.T) {
	noCluster := func(*opts) (*rest.Config, string, error) {
		return nil, "", errors.New("no cluster should be asked")
	}
	for _, c := range []struct {
		args []string
		err  error
		out  string
	}{
		{nil, nil, "Usage:\n  kubectl plumbline <command> [options]"},
		{[]string{"frobnicate"}, ErrUsage, `error: unknown command "frobnicate" for "kubectl plumbline"`},
		{[]string{"approve"}, ErrUsage, "error: approve takes VERSION; got 0 argument(s)\nSee 'kubectl plumbline approve -h' for help and examples"},
		{[]string{"history", "a", "b"}, ErrUsage, "error: history takes LINE; got 2 argument(s)"},
		{[]string{"retrain", "late-risk", "--no-such-flag"}, ErrUsage, "error: flag provided but not defined: -no-such-flag"},
		{[]string{"status", "late-risk", "-A"}, ErrUsage, "error: -A lists every namespace's lines; it cannot go with a LINE"},
		{[]string{"status", "-o", "table"}, ErrUsage, `error: -o "table": want json, yaml or wide`},
		{[]string{"history", "late-risk", "-o", "wide"}, ErrUsage, "error: -o wide: history shows json or yaml"},
		{[]string{"status", "--watch", "-o", "json"}, ErrUsage, "error: --watch follows the table of lines"},
		{[]string{"status"}, errors.New("no cluster should be asked"), ""},
		{[]string{"status", "-A", "-o", "wide", "--watch"}, errors.New("no cluster should be asked"), ""},
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

// Each command's help is laid out as kubectl's: what it does, examples,
// options with their short forms and defaults, usage.
func TestCommandHelp(t *testing.T) {
	for _, cmd := range commands {
		var out bytes.Buffer
		if err := Run(context.Background(), []string{cmd.name, "--help"}, &out, &out, nil); err != nil {
			t.Fatalf("%s --help: %v", cmd.name, err)
		}
		help := out.String()
		for _, want := range []string{"\nExamples:\n  ", "\nOptions:\n", "    -n, --namespace='':\n\t", "\nUsage:\n  kubectl plumbline " + cmd.name + " "} {
			if !strings.Contains(help, want) {
				t.Errorf("%s --help lacks %q:\n%s", cmd.name, want, help)
			}
		}
	}
	var out bytes.Buffer
	if err := Run(context.Background(), []string{"status", "-h"}, &out, &out, nil); err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"    -A, --all-namespaces=false:", "    -o, --output='':", "    -w, --watch=false:", "kubectl plumbline status -A -o wide"} {
		if !strings.Contains(out.String(), want) {
			t.Errorf("status -h lacks %q", want)
		}
	}
}

// Without any kubeconfig the error says where one is looked for, not
// client-go's hint about an environment variable kubectl no longer reads.
func TestNoKubeconfig(t *testing.T) {
	dir := t.TempDir()
	t.Setenv("KUBECONFIG", "")
	t.Setenv("HOME", dir)
	t.Setenv("KUBERNETES_SERVICE_HOST", "")
	_, _, err := loadConfig(&opts{})
	if err == nil || !strings.Contains(err.Error(), "no kubeconfig: give --kubeconfig FILE, set $KUBECONFIG, or write ~/.kube/config") || strings.Contains(err.Error(), "KUBERNETES_MASTER") {
		t.Errorf("error %v", err)
	}
}
