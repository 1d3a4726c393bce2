package checkreport

import (
	"bytes"
	"errors"
	"testing"
)

// FuzzParse: whatever a check container leaves in its termination message,
// the parser neither panics nor hangs; a refusal has a known reason and a
// message; an accepted report has sane numbers (counts not negative,
// shares and p-values between 0 and 1) and survives a round trip.
func FuzzParse(f *testing.F) {
	for _, s := range []string{
		`{"schema":"plumbline.dev/check-report/v1","rows":4500,"referenceRows":9000,"dataQuality":{"ok":true},"drift":{"detected":true,"driftedWeight":0.5,"limit":0.2,"features":[{"feature":"depot","psi":0.61,"pAdjusted":0.0001,"drifted":true},{"feature":"weight_kg","drifted":false}]},"truncated":false}`,
		`{"schema":"plumbline.dev/check-report/v1","rows":100,"referenceRows":100,"dataQuality":{"ok":false,"findings":[{"check":"missing","column":"address","count":31,"share":0.31,"limit":0.05,"example":"row 7"}]},"drift":{"detected":false,"driftedWeight":0,"limit":0.2}}`,
		``, `{}`, `{"schema":"plumbline.dev/check-report/v1","rows":-1}`, `{"schema":"plumbline.dev/check-report/v1","drift":{"driftedWeight":2}}`,
	} {
		f.Add([]byte(s))
	}
	reasons := map[string]bool{ReasonMissing: true, ReasonTooLarge: true, ReasonMalformed: true, ReasonUnknownSchema: true}
	share := func(p *float64) bool { return p == nil || *p >= 0 && *p <= 1 }
	f.Fuzz(func(t *testing.T, raw []byte) {
		r, err := Parse(raw)
		if err != nil {
			var e *Error
			if !errors.As(err, &e) || !reasons[e.Reason] || e.Message == "" {
				t.Fatalf("refusal %#v is not a check report Error with a reason and a message", err)
			}
			return
		}
		if r.Rows < 0 || r.ReferenceRows < 0 || r.Drift.DriftedWeight < 0 || r.Drift.DriftedWeight > 1 || r.Drift.Limit < 0 || r.Drift.Limit > 1 {
			t.Fatalf("accepted rows %d/%d, drifted weight %v limit %v", r.Rows, r.ReferenceRows, r.Drift.DriftedWeight, r.Drift.Limit)
		}
		for _, fd := range r.DataQuality.Findings {
			if fd.Count < 0 || !share(fd.Share) || !share(fd.Limit) || fd.Check == "" {
				t.Fatalf("accepted finding %+v", fd)
			}
		}
		for _, ft := range r.Drift.Features {
			if ft.Feature == "" || ft.PSI != nil && *ft.PSI < 0 || !share(ft.PAdjusted) {
				t.Fatalf("accepted feature %+v", ft)
			}
		}
		b, err := Encode(r)
		if err != nil {
			t.Fatalf("an accepted report does not encode: %v", err)
		}
		r2, err := Parse(b)
		if err != nil {
			t.Fatalf("an accepted report, encoded again, is refused: %v\n%s", err, b)
		}
		if b2, _ := Encode(r2); !bytes.Equal(b, b2) {
			t.Fatalf("the round trip changed the report:\n%s\n%s", b, b2)
		}
	})
}
