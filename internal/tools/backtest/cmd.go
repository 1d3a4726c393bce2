package backtest

import (
	"context"
	"flag"
	"fmt"
	"io"
	"math"
	"path/filepath"
	"strings"
	"time"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/promq"
	"plumbline.dev/plumbline/internal/engine/schedule"
	"plumbline.dev/plumbline/internal/tools/cli"
	"plumbline.dev/plumbline/internal/tools/outfile"
)

// ErrUsage marks bad flags, already explained on stderr.
var ErrUsage = cli.ErrUsage

// The commands' help.
var (
	command = cli.Command{
		Name:     "plumbline backtest",
		Synopsis: "--history FILE (--line FILE | --policies FILE | --schedule CRON | --trigger SPEC | --cusum SPEC)... [flags]",
		Summary: "Replay retraining policies over a quality history: how long each leaves quality below target, how many\n" +
			"retrains it starts, how late it answers a drop; and recommend one.",
		Examples: []string{
			"# the sample line against a weekly schedule and a CUSUM detector",
			"plumbline backtest --history auc.csv --line config/samples/larkspur_v1alpha1_modelline.yaml --line-triggers auc-drop \\",
			"    --schedule \"30 2 * * 1\" --cusum k=0.005,h=0.05 --chart policies.svg",
			"# an error metric, where lower is better",
			"plumbline backtest --history rmse.csv --better lower --target 4.5 --trigger above=4.5,for=6h,every=5m",
		},
	}
	stalenessHelp = cli.Command{
		Name:     "plumbline backtest staleness",
		Synopsis: "--history FILE --trained-at TIME --target VALUE [flags]",
		Summary:  "Fit how fast a model's quality decays since it was trained, and say how often to retrain to stay on target.",
		Examples: []string{
			"plumbline backtest staleness --history batches.csv --trained-at 2026-10-01T00:00:00Z --target 0.80 --chart decay.svg",
		},
	}
)

// list is a repeatable flag.
type list []string

func (l *list) String() string     { return strings.Join(*l, " ") }
func (l *list) Set(s string) error { *l = append(*l, s); return nil }

// historyFlags are the ways to give a history.
type historyFlags struct {
	path, url, query, from, to string
	step                       time.Duration
}

func (f *historyFlags) register(fs *flag.FlagSet) {
	fs.StringVar(&f.path, "history", "", "quality history: CSV with columns time (RFC 3339 or Unix seconds) and value, optionally labelled_rows (a cumulative count), retrained (1 where a retrain took effect) and labelled_at (when its labels came in)")
	fs.StringVar(&f.url, "prometheus-url", "", "read the history from this Prometheus instead, with --query, --from, --to, --step")
	fs.StringVar(&f.query, "query", "", "PromQL range query for the history (one series)")
	fs.StringVar(&f.from, "from", "", "start of the history (RFC 3339)")
	fs.StringVar(&f.to, "to", "", "end of the history (RFC 3339; default now)")
	fs.DurationVar(&f.step, "step", 5*time.Minute, "resolution of the range query")
}

// given refuses, before any work, a command line that gives no history.
func (f *historyFlags) given(usage func(string, ...any) error) error {
	if f.path == "" && f.url == "" {
		return usage("--history is required (or --prometheus-url with --query and --from)")
	}
	return nil
}

func (f *historyFlags) load(ctx context.Context, usage func(string, ...any) error) (*History, error) {
	switch {
	case f.path != "" && f.url != "":
		return nil, usage("give --history or --prometheus-url, not both")
	case f.path != "":
		return LoadCSV(f.path)
	case f.url == "":
		return nil, usage("--history is required (or --prometheus-url with --query and --from)")
	case f.query == "" || f.from == "":
		return nil, usage("--prometheus-url needs --query and --from")
	case f.step < time.Second:
		return nil, usage("--step %s: want a second or more", f.step)
	}
	from, err := time.Parse(time.RFC3339, f.from)
	if err != nil {
		return nil, usage("--from %q: want RFC 3339, such as 2026-10-01T00:00:00Z", f.from)
	}
	to := time.Now().UTC()
	if f.to != "" {
		if to, err = time.Parse(time.RFC3339, f.to); err != nil {
			return nil, usage("--to %q: want RFC 3339", f.to)
		}
	}
	if !to.After(from) {
		return nil, usage("--to must be after --from")
	}
	client, err := promq.New(f.url, 30*time.Second)
	if err != nil {
		return nil, usage("--prometheus-url: %v", err)
	}
	return LoadPrometheus(ctx, client, f.query, from, to, f.step)
}

// Command runs plumbline backtest. It returns ErrUsage for bad flags, an
// *InputError for input that cannot be used, and nil when it ran.
func Command(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	if len(args) > 0 && args[0] == "staleness" {
		return stalenessCommand(ctx, args[1:], stdout, stderr)
	}
	fs := cli.NewFlagSet(command, stderr)
	var (
		hf                                                    historyFlags
		line, lineTriggers, policies, out, chart, chartPolicy string
		schedules, triggers, cusums                           list
		target, afterRetrain                                  float64
		costRetrain, costHour                                 float64
		lowerIsBetter                                         better
		o                                                     = DefaultOptions()
		afterRetrainSet, targetSet, chartPolicySet            bool
	)
	hf.register(fs)
	fs.StringVar(&line, "line", "", "a ModelLine manifest whose schedule, triggers, cooldown and fresh-data minimum make a policy")
	fs.StringVar(&lineTriggers, "line-triggers", "", "the line's triggers that watch the history's metric, comma-separated (needed when it has several)")
	fs.StringVar(&policies, "policies", "", "a YAML file of policies to compare (policies: [{name, schedule, triggers, cusum, cooldownSeconds, freshDataAtLeast}])")
	fs.Var(&schedules, "schedule", "a cron schedule to compare, such as \"30 2 * * 1\" (repeatable)")
	fs.Var(&triggers, "trigger", "a trigger to compare, such as below=0.80,for=6h,every=5m (optionally delay=2h, its label delay; repeatable)")
	fs.Var(&cusums, "cusum", "a CUSUM detector to compare, such as k=0.005,h=0.05 (repeatable; target defaults to the after-retrain level)")
	fs.Float64Var(&target, "target", 0, "the quality to keep (default: the threshold of the line's first trigger)")
	fs.Var(&lowerIsBetter, "better", "which way is better for the metric: higher (a score; the default) or lower (an error: above target is bad)")
	fs.DurationVar(&o.RetrainTakes, "retrain-takes", o.RetrainTakes, "from a retrain's start to its version serving")
	fs.Float64Var(&afterRetrain, "after-retrain", 0, "quality a retrained model starts at (default: the level the history held after its own retrains, or in its first day)")
	fs.Float64Var(&o.Coverage, "coverage", o.Coverage, "share of a trigger window's points that must be there (the manager's --trigger-coverage)")
	fs.DurationVar(&o.MinEpisode, "min-episode", o.MinEpisode, "shortest stretch below target that counts as a drop to act on")
	fs.DurationVar(&o.LabelDelay, "label-delay", 0, "how long after a point its labels come in, when the history has no labelled_at column; triggers without a delay of their own judge with it, and the report says what the delay costs")
	fs.Float64Var(&costRetrain, "cost-retrain", 0, "cost of one retrain (with --cost-hour-below: recommend the cheapest policy)")
	fs.Float64Var(&costHour, "cost-hour-below", 0, "cost of an hour below target")
	fs.Float64Var(&o.MaxPerMonth, "max-per-month", o.MaxPerMonth, "most retrains a month a recommended policy may start (without costs)")
	fs.StringVar(&out, "out", "", "write the JSON report here")
	fs.StringVar(&chart, "chart", "", "draw the recommended policy (or --chart-policy) to this .svg or .png file")
	fs.StringVar(&chartPolicy, "chart-policy", "", "the policy to draw (default: the recommended one)")
	if err := cli.Parse(fs, args, 0); err != nil {
		return err
	}
	afterRetrainSet, targetSet, chartPolicySet = cli.IsSet(fs, "after-retrain"), cli.IsSet(fs, "target"), cli.IsSet(fs, "chart-policy")
	usage := func(format string, args ...any) error { return cli.Usagef(fs, format, args...) }
	if err := hf.given(usage); err != nil {
		return err
	}
	if err := chartFile(chart); err != nil {
		return usage("%v", err)
	}
	switch {
	case o.RetrainTakes < 0:
		return usage("--retrain-takes %s: want 0 or more", o.RetrainTakes)
	case !(o.Coverage > 0 && o.Coverage <= 1):
		return usage("--coverage %v: want a share above 0 and at most 1", o.Coverage)
	case costRetrain < 0 || costHour < 0:
		return usage("--cost-retrain and --cost-hour-below: want 0 or more")
	case o.MaxPerMonth <= 0:
		return usage("--max-per-month %v: want more than 0", o.MaxPerMonth)
	case o.MinEpisode < 0:
		return usage("--min-episode %s: want 0 or more", o.MinEpisode)
	case o.LabelDelay < 0:
		return usage("--label-delay %s: want 0 or more (0: labels at once)", o.LabelDelay)
	}
	var ps []Policy
	if line != "" {
		var keep []string
		for _, k := range strings.Split(lineTriggers, ",") {
			if k = strings.TrimSpace(k); k != "" {
				keep = append(keep, k)
			}
		}
		p, err := FromLine(line, keep)
		if err != nil {
			return err
		}
		ps = append(ps, p)
		if !targetSet && len(p.Triggers) > 0 {
			t := p.Triggers[0]
			if t.Below != nil {
				target = *t.Below
			} else {
				target, lowerIsBetter = *t.Above, better(true)
			}
			targetSet = true
			fmt.Fprintf(stdout, "target %g from the line's trigger %s\n", target, t.Name)
		}
	}
	if policies != "" {
		more, err := LoadPolicies(policies)
		if err != nil {
			return err
		}
		ps = append(ps, more...)
	}
	for _, s := range schedules {
		if _, err := schedule.Compute(s, "", time.Unix(0, 0), time.Unix(0, 0), nil); err != nil {
			return usage("--schedule %q: %v", s, strings.TrimPrefix(err.Error(), "spec.schedule.cron: "))
		}
		ps = append(ps, Policy{Name: fmt.Sprintf("cron %q", s), Schedule: &v1alpha1.ScheduleSpec{Cron: s}})
	}
	for _, s := range triggers {
		p, err := ParseTrigger(s)
		if err != nil {
			return usage("--trigger: %v", err)
		}
		ps = append(ps, p)
	}
	for _, s := range cusums {
		p, err := ParseCUSUM(s)
		if err != nil {
			return usage("--cusum: %v", err)
		}
		ps = append(ps, p)
	}
	if len(ps) == 0 {
		return usage("give policies to compare: --line, --policies, --schedule, --trigger or --cusum")
	}
	if !targetSet {
		return usage("--target is required (or a --line with a trigger)")
	}
	if math.IsNaN(target) || math.IsInf(target, 0) {
		return usage("--target %v: want a number", target)
	}
	o.Target, o.LowerBetter = target, bool(lowerIsBetter)
	o.CostRetrain, o.CostHourBelow = costRetrain, costHour
	if afterRetrainSet {
		o.AfterRetrain = &afterRetrain
	}
	h, err := hf.load(ctx, usage)
	if err != nil {
		return err
	}
	rep, err := Backtest(h, ps, o)
	if err != nil {
		return err
	}
	if out != "" {
		if err := outfile.WriteJSON(out, "--out", rep); err != nil {
			return err
		}
	}
	if err := WriteTable(stdout, rep); err != nil {
		return err
	}
	if chart != "" {
		name := rep.Recommendation.Policy
		if chartPolicySet {
			name = chartPolicy
		}
		if err := Chart(chart, h, rep, name); err != nil {
			return &InputError{Err: err}
		}
		fmt.Fprintf(stdout, "chart of %s: %s\n", name, chart)
	}
	return nil
}

func stalenessCommand(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := cli.NewFlagSet(stalenessHelp, stderr)
	var (
		hf                    historyFlags
		trainedAt, out, chart string
		target, margin        float64
		lowerIsBetter         better
		takes                 = 3 * time.Hour
	)
	hf.register(fs)
	fs.StringVar(&trainedAt, "trained-at", "", "when the model was trained (RFC 3339); the history is its per-batch quality since (required)")
	fs.Float64Var(&target, "target", math.NaN(), "the quality to keep (required)")
	fs.Float64Var(&margin, "margin", 0.01, "how far on the good side of target to stay")
	fs.Var(&lowerIsBetter, "better", "which way is better for the metric: higher (a score; the default) or lower (an error: above target is bad)")
	fs.DurationVar(&takes, "retrain-takes", takes, "from a retrain's start to its version serving")
	fs.StringVar(&out, "out", "", "write the JSON analysis here")
	fs.StringVar(&chart, "chart", "", "draw the fits to this .svg or .png file")
	if err := cli.Parse(fs, args, 0); err != nil {
		return err
	}
	usage := func(format string, args ...any) error { return cli.Usagef(fs, format, args...) }
	if err := hf.given(usage); err != nil {
		return err
	}
	if err := chartFile(chart); err != nil {
		return usage("%v", err)
	}
	switch {
	case trainedAt == "":
		return usage("--trained-at is required")
	case math.IsNaN(target) || math.IsInf(target, 0):
		return usage("--target is required")
	case margin < 0:
		return usage("--margin %v: want 0 or more", margin)
	case takes < 0:
		return usage("--retrain-takes %s: want 0 or more", takes)
	}
	at, err := time.Parse(time.RFC3339, trainedAt)
	if err != nil {
		return usage("--trained-at %q: want RFC 3339, such as 2026-10-01T00:00:00Z", trainedAt)
	}
	h, err := hf.load(ctx, usage)
	if err != nil {
		return err
	}
	s, err := Stale(h, at, target, margin, bool(lowerIsBetter), takes)
	if err != nil {
		return err
	}
	if out != "" {
		if err := outfile.WriteJSON(out, "--out", s); err != nil {
			return err
		}
	}
	if err := WriteStaleness(stdout, s); err != nil {
		return err
	}
	if chart != "" {
		if err := ChartStaleness(chart, h, s); err != nil {
			return &InputError{Err: err}
		}
		fmt.Fprintf(stdout, "chart: %s\n", chart)
	}
	return nil
}

// better is the --better flag: true when lower values are the better ones.
type better bool

func (b *better) String() string { return betterWord(bool(*b)) }

func (b *better) Set(v string) error {
	switch strings.ToLower(v) {
	case "higher":
		*b = false
	case "lower":
		*b = true
	default:
		return fmt.Errorf("%q: want higher or lower", v)
	}
	return nil
}

// betterWord says which way is better, for the reports.
func betterWord(lower bool) string {
	if lower {
		return "lower"
	}
	return "higher"
}

// chartFile refuses, before any work, a chart file of a kind that cannot be
// drawn; empty is no chart.
func chartFile(path string) error {
	if path == "" {
		return nil
	}
	if ext := strings.ToLower(filepath.Ext(path)); ext != ".svg" && ext != ".png" {
		return fmt.Errorf("--chart %s: name an .svg or .png file", path)
	}
	return nil
}
