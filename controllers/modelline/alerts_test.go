package modelline

import (
	"os"
	"path/filepath"
	"slices"
	"testing"
	"time"

	dto "github.com/prometheus/client_model/go"
	"github.com/prometheus/common/model"
	"github.com/prometheus/prometheus/model/labels"
	"github.com/prometheus/prometheus/promql/parser"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"sigs.k8s.io/controller-runtime/pkg/client/interceptor"
	"sigs.k8s.io/controller-runtime/pkg/metrics"
	"sigs.k8s.io/yaml"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// alertsDir holds the example alerting rules and their promtool tests.
var alertsDir = filepath.Join("..", "..", "config", "prometheus")

// waitingWorld is a Manual line whose candidate late-risk-v1 waits for a
// person while late-risk-v0 serves.
func waitingWorld(t *testing.T) *world {
	line := passLine()
	line.Spec.Gate.Approval = v1alpha1.ApprovalManual
	v0 := modelVersion("late-risk-v0", 0, v1alpha1.PhaseLive, v1alpha1.SourceImported)
	v0.Status.PromotedTime = at(-time.Hour)
	v0.Status.Promotion = &v1alpha1.PromotionStatus{Sequence: 1}
	v1 := modelVersion("late-risk-v1", 10, v1alpha1.PhaseAwaitingApproval, v1alpha1.SourceTrained)
	v1.Status.Gate = &v1alpha1.GateResult{Verdict: v1alpha1.GatePassed, Reason: "CriteriaMet"}
	return newWorld(t, interceptor.Funcs{}, line, v0, v1, scorerDeployment("late-risk-v0", v0.Spec.ArtifactURI))
}

// gathered is the manager's metric families by name, as its endpoint
// would serve them now.
func gathered(t *testing.T) map[string]*dto.MetricFamily {
	t.Helper()
	mfs, err := metrics.Registry.Gather()
	if err != nil {
		t.Fatal(err)
	}
	out := map[string]*dto.MetricFamily{}
	for _, mf := range mfs {
		out[mf.GetName()] = mf
	}
	return out
}

// series finds the value of the series of family name with exactly labels.
func series(mfs map[string]*dto.MetricFamily, name string, want map[string]string) (float64, bool) {
	mf := mfs[name]
	if mf == nil {
		return 0, false
	}
	for _, m := range mf.GetMetric() {
		got := map[string]string{}
		for _, l := range m.GetLabel() {
			got[l.GetName()] = l.GetValue()
		}
		if len(got) == len(want) && func() bool {
			for k, v := range want {
				if got[k] != v {
					return false
				}
			}
			return true
		}() {
			return m.GetGauge().GetValue(), true
		}
	}
	return 0, false
}

// The metrics the alerts read describe a line as its conditions do: a
// waiting candidate shows as ActionRequired=True (AwaitingApproval) with
// the time the wait began. By default the manager exports one series per
// line for Ready and one for each True condition, and nothing else per line.
func TestConditionMetrics(t *testing.T) {
	forgetLineMetrics(passNS, "late-risk")
	w := waitingWorld(t)
	w.mustPass()
	l := w.line()
	c := meta.FindStatusCondition(l.Status.Conditions, v1alpha1.ConditionAwaitingApproval)
	if !isTrue(c) {
		t.Fatalf("AwaitingApproval %+v", c)
	}
	mfs := gathered(t)
	at := map[string]string{"namespace": passNS, "line": "late-risk"}
	with := func(kv ...string) map[string]string {
		m := map[string]string{}
		for k, v := range at {
			m[k] = v
		}
		for i := 0; i < len(kv); i += 2 {
			m[kv[i]] = kv[i+1]
		}
		return m
	}
	const since = "plumbline_line_condition_since_timestamp_seconds"
	if v, ok := series(mfs, since, with("condition", "AwaitingApproval", "status", "True", "reason", reasonWaitingDecision)); !ok || v != float64(c.LastTransitionTime.Unix()) {
		t.Errorf("since{AwaitingApproval} = %v (present %v), want %d", v, ok, c.LastTransitionTime.Unix())
	}
	if _, ok := series(mfs, since, with("condition", "ActionRequired", "status", "True", "reason", "AwaitingApproval")); !ok {
		t.Error("since{ActionRequired, True, AwaitingApproval} is not exported")
	}
	ready := meta.FindStatusCondition(l.Status.Conditions, v1alpha1.ConditionReady)
	if _, ok := series(mfs, since, with("condition", "Ready", "status", "False", "reason", ready.Reason)); !ok {
		t.Errorf("since{Ready, False, %s} is not exported: Ready is, whatever its status", ready.Reason)
	}
	if n := lineSeries(mfs, passNS, "late-risk"); n != 1+countTrue(l.Status.Conditions) {
		t.Errorf("%d series for the line, want one for Ready and one for each of its %d True conditions", n, countTrue(l.Status.Conditions))
	}

	// With every per-line series: the gauges too, and the False conditions.
	w.r.LineMetrics = LineMetricsAll
	w.mustPass()
	mfs = gathered(t)
	if v, ok := series(mfs, "plumbline_line_condition", with("condition", "ActionRequired")); !ok || v != 1 {
		t.Errorf("plumbline_line_condition{condition=ActionRequired} = %v (present %v), want 1", v, ok)
	}
	if v, ok := series(mfs, "plumbline_line_condition_info", with("condition", "ActionRequired", "status", "True", "reason", "AwaitingApproval")); !ok || v != 1 {
		t.Errorf("plumbline_line_condition_info for ActionRequired = %v (present %v), want 1", v, ok)
	}
	fallback := meta.FindStatusCondition(l.Status.Conditions, v1alpha1.ConditionFallbackActive)
	if fallback == nil || fallback.Status != metav1.ConditionFalse {
		t.Fatalf("FallbackActive %+v, want False", fallback)
	}
	if _, ok := series(mfs, since, with("condition", "FallbackActive", "status", "False", "reason", fallback.Reason)); !ok {
		t.Error("with all per-line series, a False condition's since is not exported")
	}
	if _, ok := series(mfs, "plumbline_line_condition_info", with("condition", "ActionRequired", "status", "False", "reason", v1alpha1.ReasonNothingRequired)); ok {
		t.Error("an old status of ActionRequired is still exported")
	}
	if v, ok := series(mfs, "plumbline_line_condition", with("condition", "Ready")); !ok || v != 0 {
		t.Errorf("Ready = %v (present %v), want 0 while a candidate waits", v, ok)
	}
	// And back: the per-line gauges of the other setting do not linger.
	forgetLineMetrics(passNS, "late-risk")
	w.r.LineMetrics = LineMetricsConditions
	w.mustPass()
	if n := lineSeries(gathered(t), passNS, "late-risk"); n > 8 {
		t.Errorf("%d series for the line by default, want at most 8", n)
	}
}

// lineSeries counts the series of all families labelled with the line.
func lineSeries(mfs map[string]*dto.MetricFamily, ns, line string) int {
	n := 0
	for _, mf := range mfs {
		for _, m := range mf.GetMetric() {
			got := map[string]string{}
			for _, l := range m.GetLabel() {
				got[l.GetName()] = l.GetValue()
			}
			if got["namespace"] == ns && got["line"] == line {
				n++
			}
		}
	}
	return n
}

func countTrue(conds []metav1.Condition) int {
	n := 0
	for _, c := range conds {
		if c.Type != v1alpha1.ConditionReady && c.Status == metav1.ConditionTrue {
			n++
		}
	}
	return n
}

// knownLabelValues are the values an alert may match a line condition's
// labels on.
func knownLabelValues() map[string][]string {
	reasons := []string{
		// ActionRequired's
		v1alpha1.ReasonNothingRequired, v1alpha1.ConditionAwaitingApproval, v1alpha1.ConditionNeedsReview, v1alpha1.ConditionBlocked,
		v1alpha1.ReasonInvalidSpec, v1alpha1.ReasonServingNotFound, v1alpha1.ReasonFallbackNotFound, v1alpha1.ReasonPermissionDenied,
		// Degraded's
		reasonGuardHealthy, reasonGuardWatching, reasonGuardUnknown, reasonRegressed, reasonRegressedLate,
		reasonRollbackLimit, reasonNoFallback, reasonRollbackWaits, reasonSwitchingFallback,
		// AwaitingApproval's
		reasonWaitingDecision, "NothingWaiting",
		// FallbackActive's
		"ServingCandidate", v1alpha1.ReasonNothingLive, v1alpha1.ReasonRolledBack, "RuleBasedFallback", "Alternative", "RequestedRollback",
	}
	return map[string][]string{
		"condition": lineConditionTypes,
		"status":    {"True", "False", "Unknown"},
		"reason":    reasons,
	}
}

// checkSelector checks one selector against the exported families: the
// metric exists, every label it matches on is one of the metric's, and
// every condition, status or reason it names is one the manager writes.
func checkSelector(t *testing.T, where string, ms []*labels.Matcher, mfs map[string]*dto.MetricFamily) {
	t.Helper()
	var name string
	for _, m := range ms {
		if m.Name == model.MetricNameLabel {
			name = m.Value
		}
	}
	mf := mfs[name]
	if mf == nil {
		t.Errorf("%s: metric %q is not one the manager exports", where, name)
		return
	}
	var have []string
	for _, l := range mf.GetMetric()[0].GetLabel() {
		have = append(have, l.GetName())
	}
	known := knownLabelValues()
	for _, m := range ms {
		if m.Name == model.MetricNameLabel {
			continue
		}
		if !slices.Contains(have, m.Name) {
			t.Errorf("%s: %s has no label %q (it has %v)", where, name, m.Name, have)
		}
		if vs, ok := known[m.Name]; ok && m.Type == labels.MatchEqual && !slices.Contains(vs, m.Value) {
			t.Errorf("%s: %s=%q is not a value the manager writes (%v)", where, m.Name, m.Value, vs)
		}
	}
}

// The example alerting rules, and the series their promtool tests feed
// them, name only metrics, labels and values the manager really exports:
// promtool checks the rules' logic on hand-made series, this checks that
// those series are the manager's.
func TestAlertRulesMatchTheMetrics(t *testing.T) {
	w := waitingWorld(t)
	w.mustPass()
	mfs := gathered(t)
	p := parser.NewParser(parser.Options{})

	// promtool check rules validates the file's form; this reads only what
	// it needs of it.
	var groups struct {
		Groups []struct {
			Rules []struct {
				Alert string `json:"alert"`
				Expr  string `json:"expr"`
			} `json:"rules"`
		} `json:"groups"`
	}
	readYAML(t, filepath.Join(alertsDir, "alerts.yaml"), &groups)
	n := 0
	for _, g := range groups.Groups {
		for _, r := range g.Rules {
			expr, err := p.ParseExpr(r.Expr)
			if err != nil {
				t.Fatalf("%s: %v", r.Alert, err)
			}
			parser.Inspect(expr, func(node parser.Node, _ []parser.Node) error {
				if vs, ok := node.(*parser.VectorSelector); ok {
					n++
					checkSelector(t, r.Alert, vs.LabelMatchers, mfs)
				}
				return nil
			})
		}
	}
	if n == 0 {
		t.Fatal("no selector found in alerts.yaml")
	}

	var tests struct {
		Tests []struct {
			InputSeries []struct {
				Series string `json:"series"`
			} `json:"input_series"`
		} `json:"tests"`
	}
	readYAML(t, filepath.Join(alertsDir, "alerts_test.yaml"), &tests)
	n = 0
	for i, tc := range tests.Tests {
		for _, s := range tc.InputSeries {
			ms, err := p.ParseMetricSelector(s.Series)
			if err != nil {
				t.Fatalf("test %d: series %q: %v", i+1, s.Series, err)
			}
			n++
			checkSelector(t, "alerts_test.yaml: "+s.Series, ms, mfs)
		}
	}
	if n == 0 {
		t.Fatal("no input series found in alerts_test.yaml")
	}
}

func readYAML(t *testing.T, path string, into any) {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if err := yaml.Unmarshal(b, into); err != nil {
		t.Fatalf("%s: %v", path, err)
	}
}
