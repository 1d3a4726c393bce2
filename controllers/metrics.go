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

// lineCondition is 1 while a line's condition is True and 0 otherwise (False,
// Unknown or not set), so `plumbline_line_condition{condition="Ready"} == 0`
// finds every line that needs a person.
var lineCondition = prometheus.NewGaugeVec(prometheus.GaugeOpts{
	Name: "plumbline_line_condition",
	Help: "1 while the ModelLine's condition is True, else 0.",
}, []string{"namespace", "line", "condition"})

func init() {
	metrics.Registry.MustRegister(lineCondition)
}

func recordLineMetrics(line *v1alpha1.ModelLine) {
	for _, t := range lineConditionTypes {
		v := 0.0
		if conditionIs(line.Status.Conditions, t, metav1.ConditionTrue) {
			v = 1
		}
		lineCondition.WithLabelValues(line.Namespace, line.Name, t).Set(v)
	}
}

func forgetLineMetrics(namespace, name string) {
	lineCondition.DeletePartialMatch(prometheus.Labels{"namespace": namespace, "line": name})
}
