// Command plumbline keeps production machine-learning models good on
// Kubernetes. One binary holds the controller and the tools around it:
//
//	plumbline manager   run the controller
//	plumbline demo      run the Larkspur demo on a simulated cluster on loopback
//	plumbline evaluate  measure a candidate against the live model on a golden set
//	plumbline datacheck check a current batch of data against a reference batch
//	plumbline backtest  replay retraining policies over a quality history
//	plumbline kubectl   status, history, approve, reject, retrain, rollback
//	                    (installed as kubectl-plumbline: kubectl plumbline ...)
//	plumbline version   print the version
package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"os/signal"
	"path/filepath"
	"strings"
	"syscall"
	"time"

	// The controller reads schedules in IANA time zones; embed the zone
	// database so a minimal image without /usr/share/zoneinfo works too.
	_ "time/tzdata"

	ctrl "sigs.k8s.io/controller-runtime"
	"sigs.k8s.io/controller-runtime/pkg/log/zap"

	"plumbline.dev/plumbline/controllers/modelline"
	"plumbline.dev/plumbline/internal/manager"
	"plumbline.dev/plumbline/internal/tools/backtest"
	"plumbline.dev/plumbline/internal/tools/cli"
	"plumbline.dev/plumbline/internal/tools/ctl"
	"plumbline.dev/plumbline/internal/tools/datacheck"
	"plumbline.dev/plumbline/internal/tools/demo"
	"plumbline.dev/plumbline/internal/tools/evaluate"
)

// version is set at build time with -ldflags "-X main.version=...".
var version = "dev"

type command struct {
	name    string
	summary string
	run     func(ctx context.Context, args []string, stdout, stderr io.Writer) error
}

var commands = []command{
	{"manager", "run the controller against the cluster of the current kubeconfig", runManager},
	{"demo", "run the Larkspur demo on a simulated cluster on loopback ('demo train', 'demo score' and 'demo extract' are its Jobs' programs; 'demo world' and 'demo serve' its story's on a real cluster)", runDemo},
	{"evaluate", "measure a candidate against the live model on a golden set (the gate Job's tool)", runEvaluate},
	{"datacheck", "check a current batch of data against a reference batch: quality and drift (the check Job's tool)", runDatacheck},
	{"backtest", "replay retraining policies over a quality history; 'backtest staleness' fits how fast a model decays", runBacktest},
	{"kubectl", "what a person does at a terminal: status, history, approve, reject, retrain, rollback (installed as kubectl-plumbline: kubectl plumbline ...)", runKubectl},
	{"version", "print the version", func(_ context.Context, _ []string, stdout, _ io.Writer) error {
		_, err := fmt.Fprintln(stdout, version)
		return err
	}},
}

// errUsage marks an error whose message is already the whole story (bad
// flags): it exits 2 without a stack of context.
var errUsage = cli.ErrUsage

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	args := os.Args[1:]
	if filepath.Base(os.Args[0]) == "kubectl-plumbline" {
		// Installed as a kubectl plugin: `kubectl plumbline ...`.
		args = append([]string{"kubectl"}, args...)
	}
	code := run(ctx, args, os.Stdout, os.Stderr)
	stop()
	os.Exit(code)
}

func run(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	if len(args) == 0 || args[0] == "help" || args[0] == "-h" || args[0] == "--help" {
		usage(stdout)
		return 0
	}
	for _, c := range commands {
		if c.name != args[0] {
			continue
		}
		err := c.run(ctx, args[1:], stdout, stderr)
		switch {
		case err == nil, errors.Is(err, flag.ErrHelp):
			return 0
		case errors.Is(err, errUsage):
			return 2
		case c.name == "kubectl":
			fmt.Fprintf(stderr, "kubectl plumbline %s: %v\n", args[1], err)
			return 1
		default:
			fmt.Fprintf(stderr, "plumbline %s: %v\n", c.name, err)
			return 1
		}
	}
	fmt.Fprintf(stderr, "plumbline: unknown command %q\n\n", args[0])
	usage(stderr)
	return 2
}

func usage(w io.Writer) {
	fmt.Fprintln(w, "plumbline keeps production machine-learning models good on Kubernetes.")
	fmt.Fprintln(w)
	fmt.Fprintln(w, "Usage: plumbline <command> [flags]")
	fmt.Fprintln(w)
	fmt.Fprintln(w, "Commands:")
	for _, c := range commands {
		fmt.Fprintf(w, "  %-10s %s\n", c.name, c.summary)
	}
	fmt.Fprintln(w)
	fmt.Fprintln(w, "Run 'plumbline <command> --help' for a command's flags and examples.")
}

// parseFlags parses args, printing errors and help to stderr.
func parseFlags(fs *flag.FlagSet, args []string, _ io.Writer) error {
	return cli.Parse(fs, args, 0)
}

func runManager(ctx context.Context, args []string, _, stderr io.Writer) error {
	fs := cli.NewFlagSet(cli.Command{
		Name:     "plumbline manager",
		Synopsis: "[flags]",
		Summary:  "Run the controller against the cluster of the current kubeconfig (in a Pod: its ServiceAccount).",
		Examples: []string{
			"plumbline manager --prometheus-url http://prometheus.monitoring:9090 --leader-elect",
			"# only two namespaces, more lines at once",
			"plumbline manager --namespaces larkspur,larkspur-staging --max-concurrent-reconciles 8",
		},
	}, stderr)
	var o manager.Options
	var namespaces string
	fs.StringVar(&o.MetricsAddr, "metrics-bind-address", ":8080", "address the Prometheus metrics are served on; 0 turns them off")
	fs.StringVar(&o.ProbeAddr, "health-probe-bind-address", ":8081", "address /healthz and /readyz are served on; 0 turns them off")
	fs.BoolVar(&o.LeaderElect, "leader-elect", false, "elect a leader, so only one of several replicas acts")
	fs.StringVar(&o.LeaderElectionNamespace, "leader-election-namespace", "", "namespace of the leader-election lease (default: the manager's own)")
	fs.StringVar(&o.PrometheusURL, "prometheus-url", "", "Prometheus server that triggers, checks and guards query, for example http://prometheus.monitoring:9090")
	fs.StringVar(&namespaces, "namespaces", "", "comma-separated namespaces to act in (default: all)")
	fs.DurationVar(&o.PrometheusTimeout, "prometheus-timeout", 10*time.Second, "how long one Prometheus query may take")
	fs.IntVar(&o.MaxConcurrentReconciles, "max-concurrent-reconciles", 4, "how many lines are worked on at once")
	lineMetrics := fs.String("line-metrics", string(modelline.LineMetricsConditions), "series exported per line: conditions (one for Ready and one for each True condition, at most 8) or all (also each trigger's and the guard's state and value, the live version and the per-line counters)")
	var qps float64
	fs.Float64Var(&qps, "kube-api-qps", 50, "requests per second the manager may send the API server")
	fs.IntVar(&o.APIBurst, "kube-api-burst", 100, "requests the manager may send the API server in a burst above --kube-api-qps")
	fs.StringVar(&o.ServingSelector, "serving-selector", "", "label selector of the Deployments lines serve on, for example plumbline.dev/serving=true: only those are cached (default: every Deployment in the watched namespaces)")
	fs.BoolVar(&o.PerLineQueries, "per-line-queries", false, "ask every line's trigger and guard queries on their own, even those on a template lines share (default: one query per shared template)")
	fs.Float64Var(&o.TriggerCoverage, "trigger-coverage", 0.8, "share of a trigger window's points that must be present to judge it (fewer: Unknown)")
	zapOpts := zap.Options{}
	zapOpts.BindFlags(fs)
	if err := parseFlags(fs, args, stderr); err != nil {
		return err
	}
	for _, ns := range strings.Split(namespaces, ",") {
		if ns = strings.TrimSpace(ns); ns != "" {
			o.Namespaces = append(o.Namespaces, ns)
		}
	}
	lm, err := modelline.ParseLineMetrics(*lineMetrics)
	if err != nil {
		return cli.Usagef(fs, "%v", err)
	}
	o.LineMetrics = lm
	o.APIQPS = float32(qps)
	if err := o.Validate(); err != nil {
		return cli.Usagef(fs, "%v", err)
	}
	ctrl.SetLogger(zap.New(zap.UseFlagOptions(&zapOpts)))

	cfg, err := ctrl.GetConfig()
	if err != nil {
		return fmt.Errorf("load kubeconfig: %w", err)
	}
	mgr, err := manager.New(ctx, cfg, o)
	if err != nil {
		return err
	}
	ctrl.Log.WithName("setup").Info("starting manager", "version", version, "leaderElect", o.LeaderElect, "namespaces", o.Namespaces)
	if err := mgr.Start(ctx); err != nil {
		return fmt.Errorf("run manager: %w", err)
	}
	return nil
}

func runEvaluate(_ context.Context, args []string, stdout, stderr io.Writer) error {
	err := evaluate.Command(args, os.Getenv, stdout, stderr)
	if errors.Is(err, evaluate.ErrUsage) {
		return errUsage
	}
	return err
}

func runDatacheck(_ context.Context, args []string, stdout, stderr io.Writer) error {
	err := datacheck.Command(args, stdout, stderr)
	if errors.Is(err, datacheck.ErrUsage) {
		return errUsage
	}
	return err
}

func runBacktest(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	err := backtest.Command(ctx, args, stdout, stderr)
	if errors.Is(err, backtest.ErrUsage) {
		return errUsage
	}
	return err
}

func runDemo(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	if len(args) > 0 {
		// The programs the demo's Jobs run (see internal/demo/jobtools.go).
		switch args[0] {
		case "train":
			return demoTool(demo.Train(args[1:], stdout, stderr))
		case "score":
			return demoTool(demo.Score(args[1:], stdout, stderr))
		case "extract":
			return demoTool(demo.Extract(args[1:], stdout, stderr))
		case "world":
			return demoTool(demo.WorldCommand(args[1:], stdout, stderr))
		case "serve":
			return demoTool(demo.Serve(ctx, args[1:], stdout, stderr))
		case "targets":
			return demoTool(demo.Targets(ctx, args[1:], stdout, stderr))
		}
	}
	fs := cli.NewFlagSet(cli.Command{
		Name:     "plumbline demo",
		Synopsis: "[flags]",
		Summary: "Run the Larkspur Parcels story (synthetic data) on a simulated cluster on loopback: a real API server,\n" +
			"controller manager and scheduler, kwok nodes, Prometheus, and the plumbline controller.",
		Examples: []string{"make demo   # builds what it needs, then runs: plumbline demo --assets bin/k8s --crds config/crd/bases"},
	}, stderr)
	var o demo.Options
	fs.StringVar(&o.CRDDir, "crds", "config/crd/bases", "directory of the CRD manifests to install")
	fs.StringVar(&o.AssetsDir, "assets", "bin/k8s", "directory holding etcd, kube-apiserver, kube-controller-manager, kube-scheduler and kwok (make simcluster builds them)")
	fs.StringVar(&o.WorkDir, "work-dir", ".demo/run", "directory for the demo's kubeconfig, logs, models and pods (an earlier run's are replaced)")
	fs.DurationVar(&o.StepTimeout, "step-timeout", 3*time.Minute, "how long to wait for each step of the story")
	if err := parseFlags(fs, args, stderr); err != nil {
		return err
	}
	_, err := demo.Run(ctx, o, stdout)
	return err
}

func runKubectl(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	err := ctl.Run(ctx, args, stdout, stderr, nil)
	if errors.Is(err, ctl.ErrUsage) {
		return errUsage
	}
	return err
}

func demoTool(err error) error {
	if errors.Is(err, demo.ErrUsage) {
		return errUsage
	}
	return err
}
