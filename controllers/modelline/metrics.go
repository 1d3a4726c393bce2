package modelline

import (
	"fmt"
	"slices"
	"sync"

	"github.com/prometheus/client_golang/prometheus"
	"k8s.io/apimachinery/pkg/api/meta"
	"sigs.k8s.io/controller-runtime/pkg/metrics"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/trigger"
)

// lineConditionTypes are the conditions exported per line.
var lineConditionTypes = []string{
	v1alpha1.ConditionReady, v1alpha1.ConditionActionRequired, v1alpha1.ConditionDegraded, v1alpha1.ConditionRetraining,
	v1alpha1.ConditionAwaitingApproval, v1alpha1.ConditionFallbackActive,
	v1alpha1.ConditionBlocked, v1alpha1.ConditionNeedsReview,
}

var (
	// lineCondition is 1 while a line's condition is True and 0 otherwise
	// (False, Unknown or not set), so
	// `plumbline_line_condition{condition="ActionRequired"} == 1` finds
	// every line that needs a person.
	lineCondition = prometheus.NewGaugeVec(prometheus.GaugeOpts{
		Name: "plumbline_line_condition",
		Help: "1 while the ModelLine's condition is True, else 0.",
	}, []string{"namespace", "line", "condition"})

	// lineConditionInfo carries each condition's status and reason, for
	// alerts on one reason (a regression after probation).
	lineConditionInfo = prometheus.NewGaugeVec(prometheus.GaugeOpts{
		Name: "plumbline_line_condition_info",
		Help: "1 for the status and reason each of a ModelLine's conditions has now.",
	}, []string{"namespace", "line", "condition", "status", "reason"})

	// lineConditionSince is each condition's status and reason with the
	// time it took that status, so an alert can ask how long a line has
	// needed a person or a candidate has waited, across restarts of the
	// manager and of Prometheus. It is the one series per condition the
	// manager always exports (for Ready and the conditions that are True).
	lineConditionSince = prometheus.NewGaugeVec(prometheus.GaugeOpts{
		Name: "plumbline_line_condition_since_timestamp_seconds",
		Help: "When the ModelLine's condition took the status it has now (its lastTransitionTime), in Unix seconds, labelled with that status and its reason. Exported for Ready and each True condition (all conditions with --line-metrics=all).",
	}, []string{"namespace", "line", "condition", "status", "reason"})

	retrainsStarted = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "plumbline_retrains_started_total",
		Help: "Training Jobs started, by the version's reason (Schedule, Manual, Trigger/<name>).",
	}, []string{"namespace", "line", "reason"})

	retrainsFinished = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "plumbline_retrains_finished_total",
		Help: "Versions that reached the end of their way, by reason and result (Promoted, Rejected, Failed).",
	}, []string{"namespace", "line", "reason", "result"})

	gateDecisions = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "plumbline_gate_decisions_total",
		Help: "Gate decisions, by verdict (Passed, Failed) and reason (CriteriaMet, CriteriaNotMet, MustPassFailed, ReportMalformed, ...).",
	}, []string{"namespace", "line", "result", "reason"})

	promotions = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "plumbline_promotions_total",
		Help: "Versions promoted to live.",
	}, []string{"namespace", "line"})

	rolloutFailures = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "plumbline_rollout_failures_total",
		Help: "Promotions whose Deployment rollout failed and was undone.",
	}, []string{"namespace", "line"})

	liveVersion = prometheus.NewGaugeVec(prometheus.GaugeOpts{
		Name: "plumbline_live_version_info",
		Help: "1 for the version a line serves, labelled with its name and source.",
	}, []string{"namespace", "line", "version", "source"})

	triggerValue = prometheus.NewGaugeVec(prometheus.GaugeOpts{
		Name: "plumbline_trigger_value",
		Help: "The value a trigger's query gave at its last evaluation (the deciding series' latest point); NaN when none.",
	}, []string{"namespace", "line", "trigger"})

	triggerState = prometheus.NewGaugeVec(prometheus.GaugeOpts{
		Name: "plumbline_trigger_state",
		Help: "1 for a trigger's current state (Inactive, Pending, Firing, Unknown), 0 for the others.",
	}, []string{"namespace", "line", "trigger", "state"})

	triggerEvaluations = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "plumbline_trigger_evaluations_total",
		Help: "Trigger evaluations, by the state found.",
	}, []string{"namespace", "line", "trigger", "state"})

	retrainDecisions = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "plumbline_retrain_decisions_total",
		Help: "Decisions on whether to start a retrain, by path (Manual, Schedule, Trigger, EarlyWarning) and outcome (Started, DataQualityIssue, DegradedWithoutDrift, InsufficientData, ChecksUnknown, InFlight, Cooldown, LiveTooRecent).",
	}, []string{"namespace", "line", "path", "outcome"})

	checkRuns = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "plumbline_check_runs_total",
		Help: "Check Jobs whose end was read, by their answers: data_quality (OK, Failed, Unknown) and drift (Detected, NotDetected, Unknown).",
	}, []string{"namespace", "line", "data_quality", "drift"})

	scheduleMissed = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "plumbline_schedule_missed_total",
		Help: "Scheduled starts that never ran (missed while the controller was down, or past the starting deadline).",
	}, []string{"namespace", "line"})

	rollbacks = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "plumbline_rollbacks_total",
		Help: "Switches away from a live version, by target: previous and rule-based (the guard), requested (a person).",
	}, []string{"namespace", "line", "target"})

	guardState = prometheus.NewGaugeVec(prometheus.GaugeOpts{
		Name: "plumbline_guard_state",
		Help: "1 for the guard's current state on the live version (Inactive, Pending, Firing, Unknown), 0 for the others.",
	}, []string{"namespace", "line", "state"})

	guardEvaluations = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "plumbline_guard_evaluations_total",
		Help: "Guard evaluations on the live version, by the state found.",
	}, []string{"namespace", "line", "state"})

	guardValue = prometheus.NewGaugeVec(prometheus.GaugeOpts{
		Name: "plumbline_guard_value",
		Help: "The value the guard's query gave at its last evaluation; NaN when none.",
	}, []string{"namespace", "line"})

	lineReconciles = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "plumbline_line_reconciles_total",
		Help: "Passes of the controller over a line; a steady rate with nothing changing would mean a retry loop.",
	}, []string{"namespace", "line"})

	lastPromotion = prometheus.NewGaugeVec(prometheus.GaugeOpts{
		Name: "plumbline_last_promotion_timestamp_seconds",
		Help: "When a version last went live on the line, in Unix seconds; time() minus this is the time since.",
	}, []string{"namespace", "line"})
)

func init() {
	metrics.Registry.MustRegister(lineCondition, lineConditionInfo, lineConditionSince, retrainsStarted, retrainsFinished, gateDecisions,
		promotions, rolloutFailures, liveVersion, lastPromotion, triggerValue, triggerState,
		triggerEvaluations, retrainDecisions, checkRuns, scheduleMissed, lineReconciles, rollbacks, guardState, guardValue, guardEvaluations)
}

// LineMetrics is which series the manager exports for each line.
type LineMetrics string

const (
	// LineMetricsConditions, the default, exports one series per line for
	// Ready and one for each condition that is True:
	// plumbline_line_condition_since_timestamp_seconds, at most eight a
	// line, one for a line at rest. What happened (promotions, rollbacks,
	// gate verdicts) is in the events and the statuses.
	LineMetricsConditions LineMetrics = "conditions"
	// LineMetricsAll adds, per line, every condition's gauges, the live
	// version, each trigger's and the guard's state and value at every
	// evaluation, and the per-line counters: about 20 to 60 series a line.
	LineMetricsAll LineMetrics = "all"
)

// ParseLineMetrics reads the --line-metrics value.
func ParseLineMetrics(s string) (LineMetrics, error) {
	switch LineMetrics(s) {
	case "", LineMetricsConditions:
		return LineMetricsConditions, nil
	case LineMetricsAll:
		return LineMetricsAll, nil
	}
	return "", fmt.Errorf("--line-metrics %q: want %q (one series per line for Ready and each True condition) or %q (every per-line series)", s, LineMetricsConditions, LineMetricsAll)
}

// recordLineMetrics exports the gauges that describe a line as it is.
func recordLineMetrics(line *v1alpha1.ModelLine, live *v1alpha1.ModelVersion, level LineMetrics) {
	all := level == LineMetricsAll
	var now exportedConditions
	for _, t := range lineConditionTypes {
		c := meta.FindStatusCondition(line.Status.Conditions, t)
		if c != nil && (all || t == v1alpha1.ConditionReady || isTrue(c)) {
			lv := []string{line.Namespace, line.Name, t, string(c.Status), c.Reason}
			lineConditionSince.WithLabelValues(lv...).Set(float64(c.LastTransitionTime.Unix()))
			now.since = append(now.since, lv)
		}
		if !all {
			continue
		}
		v := 0.0
		if isTrue(c) {
			v = 1
		}
		lineCondition.WithLabelValues(line.Namespace, line.Name, t).Set(v)
		if c != nil {
			lv := []string{line.Namespace, line.Name, t, string(c.Status), c.Reason}
			lineConditionInfo.WithLabelValues(lv...).Set(1)
			now.info = append(now.info, lv)
		}
	}
	dropGoneConditions(line, now)
	if !all {
		return
	}
	liveVersion.DeletePartialMatch(prometheus.Labels{"namespace": line.Namespace, "line": line.Name})
	if live != nil {
		liveVersion.WithLabelValues(line.Namespace, line.Name, live.Name, string(live.Spec.Source)).Set(1)
	}
	if t := line.Status.LastPromotionTime; t != nil {
		lastPromotion.WithLabelValues(line.Namespace, line.Name).Set(float64(t.Unix()))
	}
}

// exportedConditions are the label values of a line's condition series
// last exported. A pass deletes only those that are gone, instead of every
// series of the line by a partial match, which walks the series of every
// line in the fleet.
type exportedConditions struct{ since, info [][]string }

// conditionSeries holds each line's exportedConditions, by namespace/name.
var conditionSeries sync.Map

// dropGoneConditions deletes the condition series a line exported before
// and no longer does, and remembers what it exports now.
func dropGoneConditions(line *v1alpha1.ModelLine, now exportedConditions) {
	key := line.Namespace + "/" + line.Name
	if old, ok := conditionSeries.Load(key); ok {
		gone := func(vec *prometheus.GaugeVec, before, after [][]string) {
			for _, lv := range before {
				if !slices.ContainsFunc(after, func(x []string) bool { return slices.Equal(x, lv) }) {
					vec.DeleteLabelValues(lv...)
				}
			}
		}
		gone(lineConditionSince, old.(exportedConditions).since, now.since)
		gone(lineConditionInfo, old.(exportedConditions).info, now.info)
	}
	conditionSeries.Store(key, now)
}

// forgetLineMetrics drops a deleted line's series.
func forgetLineMetrics(namespace, name string) {
	conditionSeries.Delete(namespace + "/" + name)
	labels := prometheus.Labels{"namespace": namespace, "line": name}
	for _, v := range []interface {
		DeletePartialMatch(prometheus.Labels) int
	}{lineCondition, lineConditionInfo, lineConditionSince, retrainsStarted, retrainsFinished, gateDecisions, promotions, rolloutFailures, liveVersion, lastPromotion,
		triggerValue, triggerState, triggerEvaluations, retrainDecisions, checkRuns, scheduleMissed, lineReconciles, rollbacks, guardState, guardValue, guardEvaluations} {
		v.DeletePartialMatch(labels)
	}
}

var triggerStates = []v1alpha1.TriggerState{v1alpha1.TriggerInactive, v1alpha1.TriggerPending, v1alpha1.TriggerFiring, v1alpha1.TriggerUnknown}

// recordTrigger exports a trigger evaluation.
func recordTrigger(line *v1alpha1.ModelLine, name string, res trigger.Result) {
	triggerValue.WithLabelValues(line.Namespace, line.Name, name).Set(res.Value)
	for _, s := range triggerStates {
		v := 0.0
		if s == res.State {
			v = 1
		}
		triggerState.WithLabelValues(line.Namespace, line.Name, name, string(s)).Set(v)
	}
	triggerEvaluations.WithLabelValues(line.Namespace, line.Name, name, string(res.State)).Inc()
}

// forgetRemovedTriggers drops the series of triggers no longer in the spec.
func forgetRemovedTriggers(line *v1alpha1.ModelLine, kept []v1alpha1.TriggerStatus) {
	for _, old := range line.Status.Triggers {
		if findTrigger(kept, old.Name) != nil {
			continue
		}
		labels := prometheus.Labels{"namespace": line.Namespace, "line": line.Name, "trigger": old.Name}
		triggerValue.DeletePartialMatch(labels)
		triggerState.DeletePartialMatch(labels)
		triggerEvaluations.DeletePartialMatch(labels)
	}
}

// recordGuard exports a guard evaluation.
func recordGuard(line *v1alpha1.ModelLine, res trigger.Result) {
	guardValue.WithLabelValues(line.Namespace, line.Name).Set(res.Value)
	guardEvaluations.WithLabelValues(line.Namespace, line.Name, string(res.State)).Inc()
	for _, s := range triggerStates {
		v := 0.0
		if s == res.State {
			v = 1
		}
		guardState.WithLabelValues(line.Namespace, line.Name, string(s)).Set(v)
	}
}
