package integration

import (
	"testing"
	"time"

	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/testenv/promserver"
)

// One series shape for every line: the ROC AUC by namespace, line and
// version. In namespace "templated" the live version's quality drops at
// 03:00 for good while another version's, and another line's, stay
// healthy.
func init() {
	scenarios["templated"] = scenario{auc: healthy, missing: constant(0.01), psi: step(hm(3, 0), 0.05, 0.4), labelled: constant(50000)}
	for _, s := range []struct {
		ns, line, version string
		auc               func(time.Time) float64
	}{
		{"templated", lineName, initial, dropAt(hm(3, 0), 0.72)},
		{"templated", lineName, "late-risk-v9", healthy},
		{"templated", "other-line", initial, healthy},
		{"other-namespace", lineName, initial, healthy},
	} {
		series := promserver.Series{Name: "larkspur_auc_by_version", Labels: map[string]string{"namespace": s.ns, "line": s.line, "version": s.version}}
		for t := day0; t.Before(day0.Add(12 * time.Hour)); t = t.Add(time.Minute) {
			series.Samples = append(series.Samples, promserver.Sample{T: t, V: s.auc(t)})
		}
		extraHistory = append(extraHistory, series)
	}
}

// A trigger whose query is a template judges the series its placeholders
// pick: this line's, in its namespace, of its live version. It fires on
// the drop only that series shows; the same text would see the healthy
// series of another version, line or namespace if it were not rendered.
func TestTriggerQueryTemplate(t *testing.T) {
	key := watchedLine(t, "templated", func(o *unstructured.Unstructured) {
		mustSet(t, o, "spec.triggers", []any{map[string]any{
			"name": "auc-drop", "below": 0.78, "forSeconds": int64(3600), "everySeconds": int64(60),
			"query": `min(larkspur_auc_by_version{namespace="{{.Namespace}}", line="{{.Line}}", version="{{.Version}}"})`,
		}})
	})
	shared := metricValue(t, "plumbline_window_answers_total", map[string]string{"source": "shared"})
	stateAt(t, key, hm(2, 0), v1alpha1.TriggerInactive)
	stateAt(t, key, hm(3, 30), v1alpha1.TriggerPending)
	st := stateAt(t, key, hm(4, 0), v1alpha1.TriggerFiring)
	mustContain(t, "message", st.Message, "below 0.78 at all 61 points over 1h0m0s")
	// The template can be shared, so the manager judged it from the shared
	// query (split by namespace, line and version), not the line's own.
	if got := metricValue(t, "plumbline_window_answers_total", map[string]string{"source": "shared"}) - shared; got < 3 {
		t.Fatalf("%v windows answered from a shared query, want at least 3", got)
	}
}
