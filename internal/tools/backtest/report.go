package backtest

import (
	"fmt"
	"io"
	"math"
	"sort"
	"text/tabwriter"
	"time"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// ReportSchema identifies version 1 of the backtest report.
const ReportSchema = "plumbline.dev/backtest-report/v1"

// Report is the whole backtest.
type Report struct {
	Schema  string      `json:"schema"`
	History HistoryInfo `json:"history"`
	Model   ModelInfo   `json:"model"`
	// Policies are the policies replayed, in the order of Results.
	Policies       []Policy       `json:"policies"`
	Results        []*Result      `json:"results"`
	Recommendation Recommendation `json:"recommendation"`
	Notes          []string       `json:"notes,omitempty"`
}

// HistoryInfo describes the history replayed.
type HistoryInfo struct {
	Source      string    `json:"source"`
	Points      int       `json:"points"`
	From        time.Time `json:"from"`
	To          time.Time `json:"to"`
	StepSeconds float64   `json:"stepSeconds"`
}

// ModelInfo is the stated model of the world the replay assumed.
type ModelInfo struct {
	Target float64 `json:"target"`
	// Better says which way is better for the metric: higher or lower.
	Better              string   `json:"better"`
	RetrainTakesSeconds float64  `json:"retrainTakesSeconds"`
	AfterRetrain        float64  `json:"afterRetrain"`
	AfterRetrainFrom    string   `json:"afterRetrainFrom"`
	Coverage            float64  `json:"coverage"`
	MinEpisodeSeconds   float64  `json:"minEpisodeSeconds"`
	CostRetrain         *float64 `json:"costRetrain,omitempty"`
	CostHourBelow       *float64 `json:"costHourBelow,omitempty"`
	MaxPerMonth         float64  `json:"maxPerMonth"`
}

// Recommendation is the policy to pick and why.
type Recommendation struct {
	Policy string `json:"policy"`
	Why    string `json:"why"`
}

// Backtest replays every policy (and "none", for comparison) over the
// history and recommends one.
func Backtest(h *History, policies []Policy, o Options) (*Report, error) {
	level, why := HeldLevel(h)
	if o.AfterRetrain != nil {
		level, why = *o.AfterRetrain, "given (--after-retrain)"
	}
	r := &Report{Schema: ReportSchema,
		History: HistoryInfo{Source: h.Source, Points: len(h.Points), From: h.Points[0].T, To: h.Points[len(h.Points)-1].T, StepSeconds: h.Step().Seconds()},
		Model: ModelInfo{Target: o.Target, Better: betterWord(o.LowerBetter), RetrainTakesSeconds: o.RetrainTakes.Seconds(), AfterRetrain: level, AfterRetrainFrom: why,
			Coverage: o.Coverage, MinEpisodeSeconds: o.MinEpisode.Seconds(), MaxPerMonth: o.MaxPerMonth}}
	if o.CostRetrain != 0 || o.CostHourBelow != 0 {
		r.Model.CostRetrain, r.Model.CostHourBelow = &o.CostRetrain, &o.CostHourBelow
	}
	all := append([]Policy{{Name: "none"}}, policies...)
	seen := map[string]bool{}
	for _, p := range all {
		if seen[p.Name] {
			return nil, inputErr("policy %q is given twice; name each policy once", p.Name)
		}
		seen[p.Name] = true
		res, err := Replay(h, p, o, level)
		if err != nil {
			return nil, err
		}
		if late(h, p, o) {
			h0, p0, o0 := labelsAtOnce(h, p, o)
			base, err := Replay(h0, p0, o0, level)
			if err != nil {
				return nil, err
			}
			res.LabelDelayCost = delayCost(res, base)
		}
		r.Policies = append(r.Policies, p)
		r.Results = append(r.Results, res)
	}
	r.Notes = append(r.Notes,
		fmt.Sprintf("a retrain serves %s after it starts, at %.4g (%s); after that the series moves as the history moved", o.RetrainTakes, level, why),
		fmt.Sprintf("each trigger judges the history as if it were the trigger's query, each point held until the next (at most %s)", max(5*time.Minute, h.Step())),
		"data-quality and drift checks are not replayed (the history holds no such data): every start is taken to pass them; the gate is taken to pass every candidate")
	switch {
	case h.LabelledAt != nil:
		r.Notes = append(r.Notes, "each point is stamped with the time of the predictions it scores and seen by triggers only once its labels are in (the history's labelled_at); a trigger's window ends its label delay ago")
	case o.LabelDelay > 0:
		r.Notes = append(r.Notes, fmt.Sprintf("each point is stamped with the time of the predictions it scores and its labels come in %s later (--label-delay); a trigger's window ends its label delay ago", o.LabelDelay))
	}
	needsRows := false
	for _, p := range policies {
		needsRows = needsRows || p.FreshDataAtLeast != nil
	}
	if needsRows && h.Labelled == nil {
		r.Notes = append(r.Notes, "a policy has a fresh-data minimum but the history has no labelled_rows column: the minimum is not replayed")
	}
	marked := 0
	for _, m := range h.Retrained {
		if m {
			marked++
		}
	}
	if marked > 0 {
		r.Notes = append(r.Notes, fmt.Sprintf("the history's own %d retrains stay in every replay, the none policy included", marked))
	}
	r.Recommendation = recommend(r.Results, o)
	return r, nil
}

// late says labels come in late for a policy's replay: the history's
// label times, the replay's delay, or a trigger's own.
func late(h *History, p Policy, o Options) bool {
	if o.lateLabels(h) {
		return true
	}
	for _, t := range p.Triggers {
		if o.labelDelay(t) > 0 {
			return true
		}
	}
	return false
}

// labelsAtOnce is the same replay with every label in at once.
func labelsAtOnce(h *History, p Policy, o Options) (*History, Policy, Options) {
	h0 := *h
	h0.LabelledAt = nil
	o.LabelDelay = 0
	p.Triggers = append([]v1alpha1.TriggerSpec(nil), p.Triggers...)
	for i := range p.Triggers {
		p.Triggers[i].LabelDelaySeconds = nil
	}
	return &h0, p, o
}

func delayCost(late, atOnce *Result) *DelayCost {
	c := &DelayCost{BelowTargetSeconds: late.BelowSeconds - atOnce.BelowSeconds, Retrains: len(late.Retrains) - len(atOnce.Retrains)}
	if late.MedianDelay != nil && atOnce.MedianDelay != nil {
		d := *late.MedianDelay - *atOnce.MedianDelay
		c.MedianDelaySeconds = &d
	}
	return c
}

// recommend picks the cheapest policy when costs are given; else the one
// with the least time below target among those within MaxPerMonth
// retrains a month, fewer retrains breaking a tie.
func recommend(results []*Result, o Options) Recommendation {
	if o.CostRetrain != 0 || o.CostHourBelow != 0 {
		var order []*Result
		for _, r := range results {
			if !r.ComparisonOnly {
				order = append(order, r)
			}
		}
		sort.SliceStable(order, func(i, j int) bool { return *order[i].Cost < *order[j].Cost })
		best := order[0]
		why := fmt.Sprintf("the lowest estimated cost, %s (%d retrains at %g and %s below target at %g an hour)",
			money(*best.Cost), len(best.Retrains), o.CostRetrain, hours(best.BelowSeconds), o.CostHourBelow)
		if len(order) > 1 {
			why += fmt.Sprintf("; next is %s at %s", order[1].Policy, money(*order[1].Cost))
		}
		return Recommendation{Policy: best.Policy, Why: why}
	}
	var ok, over, compareOnly []*Result
	for _, r := range results {
		switch {
		case r.ComparisonOnly:
			compareOnly = append(compareOnly, r)
		case r.RetrainsPerMonth <= o.MaxPerMonth:
			ok = append(ok, r)
		default:
			over = append(over, r)
		}
	}
	sort.SliceStable(ok, func(i, j int) bool {
		a, b := ok[i], ok[j]
		if math.Abs(a.BelowSeconds-b.BelowSeconds) > 0.01*math.Max(a.BelowSeconds, b.BelowSeconds) {
			return a.BelowSeconds < b.BelowSeconds
		}
		return len(a.Retrains) < len(b.Retrains)
	})
	best := ok[0] // "none" never retrains, so ok is never empty
	var why string
	if best.Policy == "none" {
		why = "no policy keeps quality on target for less time below it than not retraining at all"
	} else {
		why = fmt.Sprintf("the least time below target, %s (%.1f%% of the history), at %.1f retrains a month", hours(best.BelowSeconds), 100*best.BelowShare, best.RetrainsPerMonth)
		if best.MedianDelay != nil {
			why += fmt.Sprintf("; drops acted on after %s (median)", dur(*best.MedianDelay))
		}
		if best.Missed > 0 {
			why += fmt.Sprintf("; %d drops never acted on", best.Missed)
		}
	}
	if len(ok) > 1 {
		next := ok[1]
		why += fmt.Sprintf(". Next: %s, %s below at %.1f a month", next.Policy, hours(next.BelowSeconds), next.RetrainsPerMonth)
	}
	for _, r := range over {
		why += fmt.Sprintf(". Left out: %s retrains %.1f times a month, more than --max-per-month %g (%s below)", r.Policy, r.RetrainsPerMonth, o.MaxPerMonth, hours(r.BelowSeconds))
	}
	for _, r := range compareOnly {
		why += fmt.Sprintf(". For comparison only: %s would have had %s below at %.1f retrains a month, but the controller has no CUSUM trigger", r.Policy, hours(r.BelowSeconds), r.RetrainsPerMonth)
	}
	return Recommendation{Policy: best.Policy, Why: why}
}

func money(x float64) string { return fmt.Sprintf("%.0f", x) }

// signedDur is dur with a sign: +2h, -15m, +0m.
func signedDur(seconds float64) string {
	if seconds < 0 {
		return "-" + dur(-seconds)
	}
	return "+" + dur(seconds)
}

func hours(seconds float64) string { return dur(seconds) }

// dur prints a duration briefly: 45m, 6h05m, 2d3h.
func dur(seconds float64) string {
	d := time.Duration(seconds * float64(time.Second)).Round(time.Minute)
	switch {
	case d < time.Hour:
		return fmt.Sprintf("%dm", int(d.Minutes()))
	case d < 48*time.Hour:
		h, m := int(d.Hours()), int(d.Minutes())%60
		if m == 0 {
			return fmt.Sprintf("%dh", h)
		}
		return fmt.Sprintf("%dh%02dm", h, m)
	default:
		days, h := int(d.Hours())/24, int(d.Hours())%24
		if h == 0 {
			return fmt.Sprintf("%dd", days)
		}
		return fmt.Sprintf("%dd%dh", days, h)
	}
}

// WriteTable prints the report as a person reads it.
func WriteTable(w io.Writer, r *Report) error {
	dir := "below"
	if r.Model.Better == "lower" {
		dir = "above"
	}
	fmt.Fprintf(w, "history %s: %d points from %s to %s; target %g (quality %s it is bad)\n\n", r.History.Source, r.History.Points,
		r.History.From.Format(time.RFC3339), r.History.To.Format(time.RFC3339), r.Model.Target, dir)
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "POLICY\tRETRAINS\tPER MONTH\tBELOW TARGET\tDROPS\tMISSED\tMEDIAN DELAY\tMAX DELAY\tCOST")
	for _, res := range r.Results {
		cost := "-"
		if res.Cost != nil {
			cost = money(*res.Cost)
		}
		med, mx := "-", "-"
		if res.MedianDelay != nil {
			med, mx = dur(*res.MedianDelay), dur(*res.MaxDelay)
		}
		name := res.Policy
		if res.ComparisonOnly {
			name += " *"
		}
		fmt.Fprintf(tw, "%s\t%d\t%.1f\t%s (%.1f%%)\t%d\t%d\t%s\t%s\t%s\n", name, len(res.Retrains), res.RetrainsPerMonth,
			hours(res.BelowSeconds), 100*res.BelowShare, len(res.Episodes), res.Missed, med, mx, cost)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	fmt.Fprintf(w, "\n(drops: stretches %s target of at least %s; delay: from a drop's start to the retrain that answered it)\n", dir, dur(r.Model.MinEpisodeSeconds))
	for _, res := range r.Results {
		if res.ComparisonOnly {
			fmt.Fprintln(w, "(* for comparison only: the controller has no CUSUM trigger, so it is never recommended)")
			break
		}
	}
	var costs []string
	for _, res := range r.Results {
		if c := res.LabelDelayCost; c != nil && res.Policy != "none" {
			delay := "no drop acted on in one of the two replays"
			if c.MedianDelaySeconds != nil {
				delay = signedDur(*c.MedianDelaySeconds) + " median delay"
			}
			costs = append(costs, fmt.Sprintf("  %s: %s, %s %s target, %+d retrains", res.Policy, delay, signedDur(c.BelowTargetSeconds), dir, c.Retrains))
		}
	}
	if len(costs) > 0 {
		fmt.Fprintf(w, "\nwhat late labels cost (against the same replay with every label in at once):\n")
		for _, c := range costs {
			fmt.Fprintln(w, c)
		}
	}
	fmt.Fprintf(w, "\nrecommended: %s\n  because %s\n", r.Recommendation.Policy, r.Recommendation.Why)
	for _, n := range r.Notes {
		fmt.Fprintf(w, "note: %s\n", n)
	}
	return nil
}

// WriteStaleness prints a staleness analysis.
func WriteStaleness(w io.Writer, s *Staleness) error {
	fmt.Fprintf(w, "decay of a model trained at %s, over %d points:\n", s.TrainedAt.Format(time.RFC3339), s.Points)
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "  MODEL\tFIT\tR²\tRMSE")
	for _, f := range []Fit{s.Linear, s.Exponential} {
		if f.Unfit != "" {
			fmt.Fprintf(tw, "  %s\tnot fitted: %s\t\t\n", f.Model, f.Unfit)
			continue
		}
		form := fmt.Sprintf("q = %.4g %+.4g × age (days)", f.A, f.B)
		if f.Model == "exponential" {
			form = fmt.Sprintf("q = %.4g × exp(%.4g × age)", f.A, f.B)
		}
		if f.Model == "linear" {
			form += fmt.Sprintf(" (slope ± %.2g)", f.SlopeSE)
		}
		fmt.Fprintf(tw, "  %s\t%s\t%.3f\t%.3g\n", f.Model, form, f.R2, f.RMSE)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	fmt.Fprintf(w, "best fit: %s (lower RMSE; both have two parameters)\n", s.Best)
	if s.Suggestion.Cron != "" {
		fmt.Fprintf(w, "suggested schedule: cron %q\n", s.Suggestion.Cron)
	} else {
		fmt.Fprintln(w, "suggested schedule: none")
	}
	fmt.Fprintf(w, "  because %s\n", s.Suggestion.Why)
	return nil
}
