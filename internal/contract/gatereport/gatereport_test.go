package gatereport

import (
	"errors"
	"strings"
	"testing"
)

// The example of the gate report contract parses.
const contractExample = `{
  "schema": "plumbline.dev/gate-report/v1",
  "rows": 5000,
  "metrics": [
    {"metric": "accuracy", "segment": "", "candidate": 0.912, "baseline": 0.897, "delta": 0.015,
     "deltaLow": 0.004, "deltaHigh": 0.026, "confidence": 0.95, "pValue": 0.003, "test": "mcnemar", "n": 5000}
  ],
  "mustPass": {"total": 40, "failed": 0},
  "truncated": false
}`

func TestParseContractExample(t *testing.T) {
	r, err := Parse([]byte(contractExample))
	if err != nil {
		t.Fatal(err)
	}
	m := r.Metrics[0]
	if r.Rows != 5000 || m.Metric != "accuracy" || *m.Candidate != 0.912 || *m.DeltaLow != 0.004 || *m.Confidence != 0.95 || m.Test != "mcnemar" || r.MustPass.Total != 40 {
		t.Errorf("parsed %+v / %+v", r, m)
	}
	// Encode and parse again: the same report.
	b, err := Encode(r)
	if err != nil {
		t.Fatal(err)
	}
	r2, err := Parse(b)
	if err != nil {
		t.Fatalf("round trip: %v", err)
	}
	if *r2.Metrics[0].DeltaHigh != 0.026 || r2.MustPass.Failed != 0 {
		t.Errorf("round trip lost numbers: %+v", r2.Metrics[0])
	}
}

func TestParseRefuses(t *testing.T) {
	valid := contractExample
	cases := []struct {
		name   string
		raw    string
		reason string
		text   string
	}{
		{"empty", "", ReasonMissing, "wrote no report"},
		{"whitespace", " \n ", ReasonMissing, "wrote no report"},
		{"too large", `{"schema":"` + strings.Repeat("x", 5000) + `"}`, ReasonTooLarge, "at most 4096"},
		{"not JSON", "evaluation finished OK", ReasonMalformed, "not a valid gate report"},
		{"truncated JSON", valid[:200], ReasonMalformed, "not a valid gate report"},
		{"unknown field", strings.Replace(valid, `"deltaLow"`, `"deltaLo"`, 1), ReasonMalformed, `unknown field "deltaLo"`},
		{"wrong type", strings.Replace(valid, `"rows": 5000`, `"rows": "5000"`, 1), ReasonMalformed, "rows"},
		{"trailing data", valid + ` {}`, ReasonMalformed, "data after its JSON object"},
		{"other schema", strings.Replace(valid, "gate-report/v1", "gate-report/v2", 1), ReasonUnknownSchema, `"plumbline.dev/gate-report/v2"`},
		{"no schema", strings.Replace(valid, `"schema": "plumbline.dev/gate-report/v1",`, "", 1), ReasonUnknownSchema, `schema ""`},
		{"no rows", strings.Replace(valid, `"rows": 5000`, `"rows": 0`, 1), ReasonMalformed, "rows is 0"},
		{"no metrics", `{"schema":"plumbline.dev/gate-report/v1","rows":10,"metrics":[],"mustPass":{"total":0,"failed":0}}`, ReasonMalformed, "no metrics"},
		{"metric without name", strings.Replace(valid, `"metric": "accuracy"`, `"metric": ""`, 1), ReasonMalformed, "metrics[0] has no metric name"},
		{"no candidate, no reason", strings.Replace(valid, `"candidate": 0.912,`, "", 1), ReasonMalformed, "no candidate value"},
		{"confidence of 1", strings.Replace(valid, `"confidence": 0.95`, `"confidence": 1`, 1), ReasonMalformed, "metrics[0].confidence"},
		{"p-value above 1", strings.Replace(valid, `"pValue": 0.003`, `"pValue": 1.5`, 1), ReasonMalformed, "metrics[0].pValue"},
		{"interval upside down", strings.Replace(valid, `"deltaLow": 0.004`, `"deltaLow": 0.03`, 1), ReasonMalformed, "deltaLow (0.03) is above deltaHigh (0.026)"},
		// A report that contradicts itself: the controller cannot tell
		// which of its numbers to believe.
		{"delta is not candidate - baseline", strings.Replace(valid, `"delta": 0.015`, `"delta": 0.15`, 1), ReasonMalformed,
			"metrics[0].delta is 0.15, but candidate - baseline is 0.912 - 0.897 = 0.015"},
		{"interval above the delta", strings.Replace(strings.Replace(valid, `"deltaLow": 0.004`, `"deltaLow": 0.02`, 1), `"deltaHigh": 0.026`, `"deltaHigh": 0.03`, 1), ReasonMalformed,
			"metrics[0]: the interval [0.02, 0.03] does not contain delta 0.015"},
		{"interval below the delta, no delta given", strings.Replace(strings.Replace(strings.Replace(valid, `"deltaLow": 0.004`, `"deltaLow": -0.03`, 1), `"deltaHigh": 0.026`, `"deltaHigh": -0.01`, 1), `"delta": 0.015,`, ``, 1), ReasonMalformed,
			"metrics[0]: the interval [-0.03, -0.01] does not contain delta 0.015 (candidate - baseline)"},
		{"delta without a baseline", strings.Replace(valid, `"baseline": 0.897,`, ``, 1), ReasonMalformed,
			"metrics[0] gives delta 0.015 but no baseline"},
		{"more failed than total", strings.Replace(valid, `"failed": 0`, `"failed": 41`, 1), ReasonMalformed, "41 failed of 40"},
		{"repeated metric", strings.Replace(valid, `"n": 5000}`, `"n": 5000}, {"metric": "accuracy", "segment": "", "candidate": 0.5}`, 1), ReasonMalformed, "repeats metric"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			_, err := Parse([]byte(tc.raw))
			var e *Error
			if !errors.As(err, &e) {
				t.Fatalf("want a refusal, got %v", err)
			}
			if e.Reason != tc.reason || !strings.Contains(e.Message, tc.text) {
				t.Errorf("got %s %q; want %s containing %q", e.Reason, e.Message, tc.reason, tc.text)
			}
		})
	}
}

// Rounding to the six significant digits plumbline evaluate writes is not a
// contradiction.
func TestParseAcceptsRoundedNumbers(t *testing.T) {
	raw := strings.NewReplacer(`"candidate": 0.912`, `"candidate": 1234.57`, `"baseline": 0.897`, `"baseline": 1230.12`,
		`"delta": 0.015`, `"delta": 4.44545`, `"deltaLow": 0.004`, `"deltaLow": 4.44545`, `"deltaHigh": 0.026`, `"deltaHigh": 4.6`).Replace(contractExample)
	if _, err := Parse([]byte(raw)); err != nil {
		t.Fatalf("a report rounded to six digits: %v", err)
	}
}

func TestParseUndefinedMetric(t *testing.T) {
	raw := `{"schema":"plumbline.dev/gate-report/v1","rows":10,"metrics":[{"metric":"roc_auc","segment":"depot-7","candidate":null,"undefined":"only one class in the segment"}],"mustPass":{"total":0,"failed":0}}`
	r, err := Parse([]byte(raw))
	if err != nil {
		t.Fatal(err)
	}
	if r.Metrics[0].Candidate != nil || r.Metrics[0].Undefined == "" {
		t.Errorf("undefined metric: %+v", r.Metrics[0])
	}
}
