package checkreport

import (
	"errors"
	"fmt"
	"strings"
	"testing"
)

func TestEncodeParseRoundTrip(t *testing.T) {
	share, limit, psi, p := 0.12, 0.05, 0.31, 1e-6
	r := &Report{Schema: Schema, Rows: 48210, ReferenceRows: 51877,
		DataQuality: Quality{OK: false, Findings: []Finding{{Check: "missing", Column: "postcode", Count: 5785, Share: &share, Limit: &limit, Example: "current.csv:17"}}},
		Drift:       Drift{Detected: true, DriftedWeight: 0.4, Limit: 0.25, Features: []Feature{{Feature: "depot", PSI: &psi, PAdjusted: &p, Drifted: true}}}}
	b, err := Encode(r)
	if err != nil {
		t.Fatal(err)
	}
	got, err := Parse(b)
	if err != nil {
		t.Fatalf("Parse(%s): %v", b, err)
	}
	if got.Rows != 48210 || got.DataQuality.OK || got.DataQuality.Findings[0].Column != "postcode" || !got.Drift.Detected || *got.Drift.Features[0].PSI != psi || got.Truncated {
		t.Errorf("round trip changed the report: %+v", got)
	}
}

// A report with more findings than fit keeps its answers and says it was
// truncated.
func TestEncodeFits(t *testing.T) {
	r := &Report{Schema: Schema, Rows: 10, DataQuality: Quality{OK: false}, Drift: Drift{Detected: true, DriftedWeight: 1, Limit: 0.25}}
	for i := 0; i < 200; i++ {
		r.DataQuality.Findings = append(r.DataQuality.Findings, Finding{Check: "out_of_range", Column: fmt.Sprintf("feature_%03d", i), Count: 3, Example: "current.csv:12345"})
		r.Drift.Features = append(r.Drift.Features, Feature{Feature: fmt.Sprintf("feature_%03d", i), Drifted: true})
	}
	b, err := Encode(r)
	if err != nil {
		t.Fatal(err)
	}
	if len(b) > MaxBytes {
		t.Fatalf("%d bytes, more than %d", len(b), MaxBytes)
	}
	got, err := Parse(b)
	if err != nil {
		t.Fatal(err)
	}
	if !got.Truncated || got.DataQuality.OK || !got.Drift.Detected || len(got.Drift.Features) != 0 || len(got.DataQuality.Findings) == 0 {
		t.Errorf("truncated report: truncated=%v ok=%v drift=%v features=%d findings=%d", got.Truncated, got.DataQuality.OK, got.Drift.Detected, len(got.Drift.Features), len(got.DataQuality.Findings))
	}
	if got.DataQuality.Findings[0].Column != "feature_000" {
		t.Errorf("the first findings should be kept, got %s first", got.DataQuality.Findings[0].Column)
	}
	if len(r.Drift.Features) != 200 {
		t.Error("Encode changed the caller's report")
	}
}

func TestParseRefuses(t *testing.T) {
	cases := []struct{ name, raw, reason, want string }{
		{"empty", "  ", ReasonMissing, "wrote no report"},
		{"too large", `{"schema":"` + strings.Repeat("x", MaxBytes) + `"}`, ReasonTooLarge, "at most 4096"},
		{"not JSON", "rows: 5", ReasonMalformed, "not a valid check report"},
		{"unknown field", `{"schema":"plumbline.dev/check-report/v1","rows":1,"dataQuality":{"ok":true},"drift":{},"verdict":"fine"}`, ReasonMalformed, `unknown field "verdict"`},
		{"trailing data", `{"schema":"plumbline.dev/check-report/v1","dataQuality":{"ok":true},"drift":{}} {}`, ReasonMalformed, "data after"},
		{"other schema", `{"schema":"plumbline.dev/check-report/v2","dataQuality":{"ok":true},"drift":{}}`, ReasonUnknownSchema, "is not"},
		{"negative rows", `{"schema":"plumbline.dev/check-report/v1","rows":-1,"dataQuality":{"ok":true},"drift":{}}`, ReasonMalformed, "negative"},
		{"not ok without findings", `{"schema":"plumbline.dev/check-report/v1","rows":1,"dataQuality":{"ok":false},"drift":{}}`, ReasonMalformed, "lists no finding"},
		{"share out of range", `{"schema":"plumbline.dev/check-report/v1","rows":1,"dataQuality":{"ok":true},"drift":{"driftedWeight":1.5}}`, ReasonMalformed, "not a part of the whole"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := Parse([]byte(c.raw))
			var e *Error
			if !errors.As(err, &e) || e.Reason != c.reason || !strings.Contains(e.Message, c.want) {
				t.Errorf("Parse: %v, want %s containing %q", err, c.reason, c.want)
			}
		})
	}
}
