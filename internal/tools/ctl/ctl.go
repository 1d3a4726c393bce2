// Package ctl is `kubectl plumbline`: the plumbline binary installed (or
// linked) as kubectl-plumbline, for a person at a terminal. It reads lines
// and versions and acts the way the API documents (annotations and
// spec.decision), so everything it does can also be done with kubectl
// annotate and kubectl patch.
package ctl

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"strings"
	"time"

	"k8s.io/client-go/rest"
	"k8s.io/client-go/tools/clientcmd"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/internal/manager"
	"plumbline.dev/plumbline/internal/tools/cli"
)

// ErrUsage marks an error whose message is already printed (bad flags).
var ErrUsage = cli.ErrUsage

type command struct {
	name, args, summary string
	// long says what the command does, for its help; examples show it.
	long     string
	examples []string
	run      func(ctx context.Context, e *env, pos []string) error
	flags    func(f *flags, o *opts)
	npos     [2]int // fewest and most positional arguments
}

// opts are the flags of every command.
type opts struct {
	kubeconfig, context, namespace string
	token, to, note                string
	allNamespaces, watch           bool
	output                         string
	now                            func() time.Time
}

// The outputs of -o.
const (
	outTable = ""
	outWide  = "wide"
	outJSON  = "json"
	outYAML  = "yaml"
)

// listing adds what kubectl's get has: -A, -o and --watch.
func listing(f *flags, o *opts) {
	f.boolVar(&o.allNamespaces, "A", "all-namespaces", "List the lines of every namespace (with LINE: refused).")
	f.stringVar(&o.output, "o", "output", "", "Output format: wide (more columns), json or yaml (the objects).")
	f.boolVar(&o.watch, "w", "watch", "After the list, print a line's row again each time it changes (Ctrl-C ends it).")
}

// output adds -o json|yaml.
func output(f *flags, o *opts) {
	f.stringVar(&o.output, "o", "output", "", "Output format: json or yaml (the objects) instead of the table.")
}

var commands = []command{
	{name: "status", args: "[LINE]", summary: "the lines of the namespace, or one line in full: conditions, triggers, guard, last check",
		long: "Show the model lines of the namespace (or of every namespace with -A) in a table: what serves, whether the\n" +
			"line is Ready, whether a person must act and why, what is in flight or waits for approval. With LINE, show\n" +
			"that line in full: its conditions with their messages, triggers, guard and last check.",
		examples: []string{
			"# every line in every namespace, with more columns",
			"kubectl plumbline status -A -o wide",
			"# one line in full",
			"kubectl plumbline status late-risk -n larkspur",
			"# follow the lines of a namespace as they change",
			"kubectl plumbline status -n larkspur --watch",
		}, run: runStatus, flags: listing, npos: [2]int{0, 1}},
	{name: "explain", args: "LINE", summary: "why a line retrained or did not, what it waits for, and what a person could do",
		long: "Explain a line's decisions in plain words: what serves and whether it is healthy, what could start a retrain\n" +
			"(schedule, triggers, a person) and what holds it back (a version in flight, the cooldown, a live version too\n" +
			"recent to judge, the checks), what the line waits for, and what a person could do now.",
		examples: []string{"kubectl plumbline explain late-risk -n larkspur"},
		run:      runExplain, npos: [2]int{1, 1}},
	{name: "history", args: "LINE", summary: "a line's versions, newest first, with what became of each and why",
		long:     "List a line's versions, newest first: where each came from, what started it, its phase, its gate verdict and why.",
		examples: []string{"kubectl plumbline history late-risk -n larkspur", "kubectl plumbline history late-risk -o yaml"},
		run:      runHistory, flags: output, npos: [2]int{1, 1}},
	{name: "approve", args: "VERSION", summary: "approve a candidate that waits for a person (spec.decision: Approved)",
		long: "Approve a version that waits for a person's decision (AwaitingApproval): the controller rolls it out. The\n" +
			"decision is made once; --note records why.",
		examples: []string{`kubectl plumbline approve late-risk-v4 -n larkspur --note "checked the Fenwick depot"`},
		run:      runApprove,
		flags: func(f *flags, o *opts) {
			f.stringVar(&o.note, "", "note", "", "Why, recorded in spec.decisionNote.")
		}, npos: [2]int{1, 1}},
	{name: "reject", args: "VERSION", summary: "reject a candidate before its rollout (spec.decision: Rejected); a queued one is cancelled",
		long:     "Reject a version before its rollout: a running Job of it is stopped, and the live version stays.",
		examples: []string{`kubectl plumbline reject late-risk-v4 -n larkspur --note "trained on the broken address feed"`},
		run:      runReject,
		flags: func(f *flags, o *opts) {
			f.stringVar(&o.note, "", "note", "", "Why, recorded in spec.decisionNote.")
		}, npos: [2]int{1, 1}},
	{name: "retrain", args: "LINE", summary: "ask for a retrain (the plumbline.dev/retrain-request annotation); it goes through the checks",
		long: "Ask a line for a retrain. It goes through the line's checks like any other start, and waits for a version in\n" +
			"flight. Each token acts once.",
		examples: []string{"kubectl plumbline retrain late-risk -n larkspur", "kubectl plumbline retrain late-risk --token after-feed-fix"},
		run:      runRetrain,
		flags: func(f *flags, o *opts) {
			f.stringVar(&o.token, "", "token", "", "The request's token, acted on once (default: from the time).")
		}, npos: [2]int{1, 1}},
	{name: "rollback", args: "LINE --to VERSION", summary: "serve an archived or the rule-based version again (the plumbline.dev/rollback-to annotation)",
		long: "Serve an archived version, or the line's rule-based version, again. Each token acts once, so the same version\n" +
			"can be asked for again.",
		examples: []string{"kubectl plumbline rollback late-risk --to late-risk-v2 -n larkspur", "kubectl plumbline rollback late-risk --to late-risk-rules"},
		run:      runRollback,
		flags: func(f *flags, o *opts) {
			f.stringVar(&o.to, "", "to", "", "The archived or rule-based version to serve (required).")
			f.stringVar(&o.token, "", "token", "", "The request's token, acted on once (default: from the time).")
		}, npos: [2]int{1, 1}},
}

// env is what a command works with.
type env struct {
	c   client.WithWatch
	ns  string
	out io.Writer
	o   *opts
}

// flags registers a command's options and remembers them for its help, in
// kubectl's layout (-A, --all-namespaces=false: ...).
type flags struct {
	fs   *flag.FlagSet
	help []option
}

type option struct{ short, long, def, usage string }

func (f *flags) stringVar(p *string, short, long, def, usage string) {
	f.fs.StringVar(p, long, def, usage)
	if short != "" {
		f.fs.StringVar(p, short, def, usage)
	}
	f.help = append(f.help, option{short, long, "'" + def + "'", usage})
}

func (f *flags) boolVar(p *bool, short, long, usage string) {
	f.fs.BoolVar(p, long, false, usage)
	if short != "" {
		f.fs.BoolVar(p, short, false, usage)
	}
	f.help = append(f.help, option{short, long, "false", usage})
}

// printHelp prints a command's help the way kubectl does: what it does,
// examples, options, usage.
func printHelp(w io.Writer, cmd *command, f *flags) {
	fmt.Fprintf(w, "%s\n", cmd.long)
	if len(cmd.examples) > 0 {
		fmt.Fprintln(w, "\nExamples:")
		for _, e := range cmd.examples {
			fmt.Fprintf(w, "  %s\n", e)
		}
	}
	fmt.Fprintln(w, "\nOptions:")
	for _, o := range f.help {
		name := "--" + o.long
		if o.short != "" {
			name = "-" + o.short + ", " + name
		}
		fmt.Fprintf(w, "    %s=%s:\n\t%s\n\n", name, o.def, o.usage)
	}
	fmt.Fprintf(w, "Usage:\n  kubectl plumbline %s %s [options]\n\n", cmd.name, cmd.args)
	fmt.Fprintln(w, "Use \"kubectl plumbline --help\" for the list of commands.")
}

// Run runs `kubectl plumbline` with its arguments (without the program
// name). newConfig, when not nil, replaces the kubeconfig loading (tests).
func Run(ctx context.Context, args []string, stdout, stderr io.Writer, newConfig func(o *opts) (*rest.Config, string, error)) error {
	if len(args) == 0 || args[0] == "help" || args[0] == "-h" || args[0] == "--help" {
		usage(stdout)
		return nil
	}
	var cmd *command
	for i := range commands {
		if commands[i].name == args[0] {
			cmd = &commands[i]
		}
	}
	if cmd == nil {
		fmt.Fprintf(stderr, "error: unknown command %q for \"kubectl plumbline\"\n\n", args[0])
		usage(stderr)
		return ErrUsage
	}
	o := &opts{now: time.Now}
	fs := flag.NewFlagSet("kubectl plumbline "+cmd.name, flag.ContinueOnError)
	fs.SetOutput(io.Discard) // errors are told below, kubectl's way
	f := &flags{fs: fs}
	if cmd.flags != nil {
		cmd.flags(f, o)
	}
	f.stringVar(&o.namespace, "n", "namespace", "", "The namespace (default: the kubeconfig context's).")
	f.stringVar(&o.context, "", "context", "", "The kubeconfig context to use.")
	f.stringVar(&o.kubeconfig, "", "kubeconfig", "", "Path to the kubeconfig (default: $KUBECONFIG, then ~/.kube/config).")
	bad := func(format string, a ...any) error {
		fmt.Fprintf(stderr, "error: %s\nSee 'kubectl plumbline %s -h' for help and examples\n", fmt.Sprintf(format, a...), cmd.name)
		return ErrUsage
	}
	pos, err := parseInterspersed(fs, args[1:])
	switch {
	case errors.Is(err, flag.ErrHelp):
		printHelp(stdout, cmd, f)
		return nil
	case err != nil:
		return bad("%v", err)
	case len(pos) < cmd.npos[0] || len(pos) > cmd.npos[1]:
		return bad("%s takes %s; got %d argument(s)", cmd.name, cmd.args, len(pos))
	case o.allNamespaces && len(pos) > 0:
		return bad("-A lists every namespace's lines; it cannot go with a LINE")
	case o.watch && (len(pos) > 0 || o.output == outJSON || o.output == outYAML):
		return bad("--watch follows the table of lines; it goes with neither a LINE nor -o %s", o.output)
	}
	switch o.output {
	case outTable, outWide, outJSON, outYAML:
		if o.output == outWide && cmd.name != "status" {
			return bad("-o wide: %s shows json or yaml", cmd.name)
		}
	default:
		return bad("-o %q: want json, yaml or wide", o.output)
	}
	if newConfig == nil {
		newConfig = loadConfig
	}
	cfg, ns, err := newConfig(o)
	if err != nil {
		return err
	}
	scheme, err := manager.Scheme()
	if err != nil {
		return err
	}
	c, err := client.NewWithWatch(cfg, client.Options{Scheme: scheme})
	if err != nil {
		return fmt.Errorf("connect to the cluster: %w", err)
	}
	return cmd.run(ctx, &env{c: c, ns: ns, out: stdout, o: o}, pos)
}

// parseInterspersed parses flags before, between and after positional
// arguments, as kubectl does, and returns the positional ones.
func parseInterspersed(fs *flag.FlagSet, args []string) ([]string, error) {
	var pos []string
	for {
		if err := fs.Parse(args); err != nil {
			return nil, err
		}
		args = fs.Args()
		if len(args) == 0 {
			return pos, nil
		}
		if args[0] == "--" {
			return append(pos, args[1:]...), nil
		}
		pos = append(pos, args[0])
		args = args[1:]
	}
}

// loadConfig reads the kubeconfig the way kubectl does.
func loadConfig(o *opts) (*rest.Config, string, error) {
	rules := clientcmd.NewDefaultClientConfigLoadingRules()
	rules.ExplicitPath = o.kubeconfig
	cc := clientcmd.NewNonInteractiveDeferredLoadingClientConfig(rules, &clientcmd.ConfigOverrides{CurrentContext: o.context})
	cfg, err := cc.ClientConfig()
	if clientcmd.IsEmptyConfig(err) {
		return nil, "", errors.New("no kubeconfig: give --kubeconfig FILE, set $KUBECONFIG, or write ~/.kube/config (kind export kubeconfig, for a kind cluster)")
	}
	if err != nil {
		return nil, "", fmt.Errorf("load the kubeconfig: %w", err)
	}
	ns := o.namespace
	if ns == "" {
		if ns, _, err = cc.Namespace(); err != nil {
			return nil, "", fmt.Errorf("the kubeconfig's namespace: %w", err)
		}
	}
	return cfg, ns, nil
}

func usage(w io.Writer) {
	fmt.Fprintln(w, "What a person does with plumbline's model lines, from a terminal.")
	fmt.Fprintln(w, "\nCommands:")
	for _, c := range commands {
		fmt.Fprintf(w, "  %-9s %s\n", c.name, c.summary)
	}
	fmt.Fprintln(w, "\nUsage:\n  kubectl plumbline <command> [options]")
	fmt.Fprintln(w, "\nEvery command takes -n/--namespace, --context and --kubeconfig; status takes -A, -o and --watch.")
	fmt.Fprintln(w, "Use \"kubectl plumbline <command> --help\" for more information about a command.")
}

func oneLine(s string) string { return strings.Join(strings.Fields(s), " ") }
