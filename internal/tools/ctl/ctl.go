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
)

// ErrUsage marks an error whose message is already printed (bad flags).
var ErrUsage = errors.New("usage")

type command struct {
	name, args, summary string
	run                 func(ctx context.Context, e *env, pos []string) error
	flags               func(fs *flag.FlagSet, o *opts)
	npos                [2]int // fewest and most positional arguments
}

// opts are the flags of every command.
type opts struct {
	kubeconfig, context, namespace string
	token, to, note                string
	now                            func() time.Time
}

var commands = []command{
	{"status", "[LINE]", "the lines of the namespace, or one line in full: conditions, triggers, guard, last check", runStatus, nil, [2]int{0, 1}},
	{"history", "LINE", "a line's versions, newest first, with what became of each and why", runHistory, nil, [2]int{1, 1}},
	{"approve", "VERSION", "approve a candidate that waits for a person (spec.decision: Approved)", runApprove,
		func(fs *flag.FlagSet, o *opts) {
			fs.StringVar(&o.note, "note", "", "why, recorded in spec.decisionNote")
		}, [2]int{1, 1}},
	{"reject", "VERSION", "reject a candidate before its rollout (spec.decision: Rejected); a queued one is cancelled", runReject,
		func(fs *flag.FlagSet, o *opts) {
			fs.StringVar(&o.note, "note", "", "why, recorded in spec.decisionNote")
		}, [2]int{1, 1}},
	{"retrain", "LINE", "ask for a retrain (the plumbline.dev/retrain-request annotation); it goes through the checks", runRetrain,
		func(fs *flag.FlagSet, o *opts) {
			fs.StringVar(&o.token, "token", "", "the request's token, acted on once (default: from the time)")
		}, [2]int{1, 1}},
	{"rollback", "LINE --to VERSION", "serve an archived or the rule-based version again (the plumbline.dev/rollback-to annotation)", runRollback,
		func(fs *flag.FlagSet, o *opts) {
			fs.StringVar(&o.to, "to", "", "the archived or rule-based version to serve (required)")
			fs.StringVar(&o.token, "token", "", "the request's token, acted on once, so the same version can be asked for again (default: from the time)")
		}, [2]int{1, 1}},
}

// env is what a command works with.
type env struct {
	c   client.Client
	ns  string
	out io.Writer
	o   *opts
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
		fmt.Fprintf(stderr, "kubectl plumbline: unknown command %q\n\n", args[0])
		usage(stderr)
		return ErrUsage
	}
	o := &opts{now: time.Now}
	fs := flag.NewFlagSet("kubectl plumbline "+cmd.name, flag.ContinueOnError)
	fs.SetOutput(stderr)
	fs.StringVar(&o.kubeconfig, "kubeconfig", "", "path to the kubeconfig (default: $KUBECONFIG, then ~/.kube/config)")
	fs.StringVar(&o.context, "context", "", "the kubeconfig context to use")
	fs.StringVar(&o.namespace, "namespace", "", "the namespace (default: the context's)")
	fs.StringVar(&o.namespace, "n", "", "shorthand for --namespace")
	if cmd.flags != nil {
		cmd.flags(fs, o)
	}
	fs.Usage = func() {
		fmt.Fprintf(stderr, "Usage: kubectl plumbline %s %s [flags]\n\n%s\n\nFlags:\n", cmd.name, cmd.args, cmd.summary)
		fs.PrintDefaults()
	}
	pos, err := parseInterspersed(fs, args[1:])
	if err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return nil
		}
		return ErrUsage
	}
	if len(pos) < cmd.npos[0] || len(pos) > cmd.npos[1] {
		fmt.Fprintf(stderr, "Usage: kubectl plumbline %s %s\n", cmd.name, cmd.args)
		return ErrUsage
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
	c, err := client.New(cfg, client.Options{Scheme: scheme})
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
	fmt.Fprintln(w, "Usage: kubectl plumbline <command> [flags]")
	fmt.Fprintln(w, "\nWhat a person does with plumbline's model lines, from a terminal.")
	fmt.Fprintln(w, "\nCommands:")
	for _, c := range commands {
		fmt.Fprintf(w, "  %-9s %-18s %s\n", c.name, c.args, c.summary)
	}
	fmt.Fprintln(w, "\nEvery command takes --namespace/-n, --context and --kubeconfig; 'kubectl plumbline <command> -h' lists its own.")
}

func oneLine(s string) string { return strings.Join(strings.Fields(s), " ") }
