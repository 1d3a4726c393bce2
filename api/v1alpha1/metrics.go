package v1alpha1

// knownMetrics are the metrics plumbline evaluate reports, with the way each
// improves. A gate criterion on one of them needs no `better`; the CEL rule
// on GateCriterion lists the same names (a test keeps the two in step).
var knownMetrics = map[string]Better{
	"accuracy":          HigherBetter,
	"balanced_accuracy": HigherBetter,
	"precision":         HigherBetter,
	"recall":            HigherBetter,
	"f1":                HigherBetter,
	"f1_macro":          HigherBetter,
	"f1_micro":          HigherBetter,
	"f1_weighted":       HigherBetter,
	"mcc":               HigherBetter,
	"roc_auc":           HigherBetter,
	"average_precision": HigherBetter,
	"log_loss":          LowerBetter,
	"brier":             LowerBetter,
	"mae":               LowerBetter,
	"rmse":              LowerBetter,
	"mape":              LowerBetter,
	"r2":                HigherBetter,
}

// KnownBetter returns which way is better for a metric plumbline evaluate
// reports, and false for any other name.
func KnownBetter(metric string) (Better, bool) {
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

// EffectiveBetter is which way is better for the criterion's metric: the way
// it sets, else the metric's known way, else HigherBetter (admission refuses an
// unknown metric without `better`, so the last case is not reached for a
// stored object).
func (c GateCriterion) EffectiveBetter() Better {
	if c.Better != "" {
		return c.Better
	}
	if d, ok := knownMetrics[c.Metric]; ok {
		return d
	}
	return HigherBetter
}
