package v1alpha1

// knownMetrics are the metrics plumbline evaluate reports, with the way each
// improves. A gate criterion on one of them needs no direction; the CEL rule
// on GateCriterion lists the same names (a test keeps the two in step).
var knownMetrics = map[string]MetricDirection{
	"accuracy":          HigherIsBetter,
	"balanced_accuracy": HigherIsBetter,
	"precision":         HigherIsBetter,
	"recall":            HigherIsBetter,
	"f1":                HigherIsBetter,
	"f1_macro":          HigherIsBetter,
	"f1_micro":          HigherIsBetter,
	"f1_weighted":       HigherIsBetter,
	"mcc":               HigherIsBetter,
	"roc_auc":           HigherIsBetter,
	"average_precision": HigherIsBetter,
	"log_loss":          LowerIsBetter,
	"brier":             LowerIsBetter,
	"mae":               LowerIsBetter,
	"rmse":              LowerIsBetter,
	"mape":              LowerIsBetter,
	"r2":                HigherIsBetter,
}

// KnownMetricDirection returns the direction of a metric plumbline evaluate
// reports, and false for any other name.
func KnownMetricDirection(metric string) (MetricDirection, bool) {
	d, ok := knownMetrics[metric]
	return d, ok
}

// KnownMetrics returns the names of the metrics plumbline evaluate reports.
func KnownMetrics() []string {
	names := make([]string, 0, len(knownMetrics))
	for n := range knownMetrics {
		names = append(names, n)
	}
	return names
}

// EffectiveDirection is the criterion's direction: the one it sets, else the
// known direction of its metric, else HigherIsBetter (admission refuses an
// unknown metric without a direction, so the last case is not reached for a
// stored object).
func (c GateCriterion) EffectiveDirection() MetricDirection {
	if c.Direction != "" {
		return c.Direction
	}
	if d, ok := knownMetrics[c.Metric]; ok {
		return d
	}
	return HigherIsBetter
}
