package controllers

import (
	"github.com/prometheus/client_golang/prometheus"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"sigs.k8s.io/controller-runtime/pkg/metrics"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// lineConditionTypes are the conditions exported per line.
var lineConditionTypes = []string{
	v1alpha1.ConditionReady, v1alpha1.ConditionDegraded, v1alpha1.ConditionRetraining,
	v1alpha1.ConditionAwaitingApproval, v1alpha1.ConditionFallbackActive,
	v1alpha1.ConditionBlocked, v1alpha1.ConditionNeedsReview,
}

var (
	// lineCondition is 1 while a line's condition is True and 0 otherwise
	// (False, Unknown or not set), so
	// `plumbline_line_condition{condition="Ready"} == 0` finds every line
	// that needs a person.
	lineCondition = prometheus.NewGaugeVec(prometheus.GaugeOpts{
		Name: "plumbline_line_condition",
		Help: "1 while the ModelLine's condition is True, else 0.",
	}, []string{"namespace", "line", "condition"})

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

	lastPromotion = prometheus.NewGaugeVec(prometheus.GaugeOpts{
		Name: "plumbline_last_promotion_timestamp_seconds",
		Help: "When a version last went live on the line, in Unix seconds; time() minus this is the time since.",
	}, []string{"namespace", "line"})
)

func init() {
	metrics.Registry.MustRegister(lineCondition, retrainsStarted, retrainsFinished, gateDecisions,
		promotions, rolloutFailures, liveVersion, lastPromotion)
}

// recordLineMetrics exports the gauges that describe a line as it is.
func recordLineMetrics(line *v1alpha1.ModelLine, live *v1alpha1.ModelVersion) {
	for _, t := range lineConditionTypes {
		v := 0.0
		if conditionIs(line.Status.Conditions, t, metav1.ConditionTrue) {
			v = 1
		}
		lineCondition.WithLabelValues(line.Namespace, line.Name, t).Set(v)
	}
	liveVersion.DeletePartialMatch(prometheus.Labels{"namespace": line.Namespace, "line": line.Name})
	if live != nil {
		liveVersion.WithLabelValues(line.Namespace, line.Name, live.Name, string(live.Spec.Source)).Set(1)
	}
	if t := line.Status.LastPromotionTime; t != nil {
		lastPromotion.WithLabelValues(line.Namespace, line.Name).Set(float64(t.Unix()))
	}
}

// forgetLineMetrics drops a deleted line's series.
func forgetLineMetrics(namespace, name string) {
	labels := prometheus.Labels{"namespace": namespace, "line": name}
	for _, v := range []interface {
		DeletePartialMatch(prometheus.Labels) int
	}{lineCondition, retrainsStarted, retrainsFinished, gateDecisions, promotions, rolloutFailures, liveVersion, lastPromotion} {
		v.DeletePartialMatch(labels)
	}
}
