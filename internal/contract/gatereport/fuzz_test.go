package gatereport_test

import (
	"bytes"
	"errors"
	"testing"

	"k8s.io/utils/ptr"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/contract/gatereport"
	"plumbline.dev/plumbline/internal/engine/gate"
)

// FuzzParse: whatever an evaluation container leaves in its termination
// message, the parser neither panics nor hangs; a refusal is a gate report
// Error with a known reason and a message; an accepted report survives a
// round trip unchanged and can be judged.
func FuzzParse(f *testing.F) {
	for _, s := range []string{
		`{"schema":"plumbline.dev/gate-report/v1","rows":5000,"metrics":[{"metric":"accuracy","segment":"","candidate":0.912,"baseline":0.897,"delta":0.015,"deltaLow":0.004,"deltaHigh":0.026,"confidence":0.95,"pValue":0.003,"test":"mcnemar","n":5000}],"mustPass":{"total":40,"failed":0},"truncated":false}`,
		`{"schema":"plumbline.dev/gate-report/v1","rows":10,"metrics":[{"metric":"roc_auc","segment":"depot-7","candidate":null,"undefined":"only one class"}],"mustPass":{"total":0,"failed":0}}`,
		`{"schema":"plumbline.dev/gate-report/v1","rows":3,"metrics":[{"metric":"rmse","segment":"north","candidate":1.5,"baseline":1.25,"delta":0.25,"deltaHigh":0.4,"confidence":0.9}],"mustPass":{"total":2,"failed":1,"failedIds":["LK-1"]},"truncated":true}`,
		``, `{}`, `null`, `[]`, `{"schema":"plumbline.dev/gate-report/v1"}`, `{"rows":1e400}`,
	} {
		f.Add([]byte(s))
	}
	reasons := map[string]bool{gatereport.ReasonMissing: true, gatereport.ReasonTooLarge: true, gatereport.ReasonMalformed: true, gatereport.ReasonUnknownSchema: true}
	criteria := []v1alpha1.GateCriterion{
		{Metric: "accuracy", Minimum: ptr.To(0.8), MaxRegression: ptr.To(0.01)},
		{Metric: "roc_auc", Segment: "*", MaxRegression: ptr.To(0.02), Confidence: ptr.To(0.9)},
		{Metric: "rmse", Better: v1alpha1.LowerBetter, Maximum: ptr.To(2.0), MaxRegression: ptr.To(0.1)},
	}
	f.Fuzz(func(t *testing.T, raw []byte) {
		r, err := gatereport.Parse(raw)
		if err != nil {
			var e *gatereport.Error
			if !errors.As(err, &e) || !reasons[e.Reason] || e.Message == "" {
				t.Fatalf("refusal %#v is not a gate report Error with a reason and a message", err)
			}
			return
		}
		b, err := gatereport.Encode(r)
		if err != nil {
			t.Fatalf("an accepted report does not encode: %v", err)
		}
		r2, err := gatereport.Parse(b)
		if err != nil {
			t.Fatalf("an accepted report, encoded again, is refused: %v\n%s", err, b)
		}
		if b2, _ := gatereport.Encode(r2); !bytes.Equal(b, b2) {
			t.Fatalf("the round trip changed the report:\n%s\n%s", b, b2)
		}
		res := gate.Decide(criteria, r, true)
		if res.Verdict != v1alpha1.GatePassed && res.Verdict != v1alpha1.GateFailed || res.Message == "" {
			t.Fatalf("judged %+v", res)
		}
	})
}
