// Package checkreport is the contract between a ModelLine's check Job
// (plumbline datacheck) and the controller: the compact report the Job's
// last container writes to its termination message, with the three answers
// the controller needs: is the data sound, have the inputs drifted, how
// many rows were seen. Parsing is strict, as for the gate report.
package checkreport

import (
	"encoding/json"
	"fmt"

	"plumbline.dev/plumbline/internal/contract/termination"
)

// Schema identifies version 1 of the check report.
const Schema = "plumbline.dev/check-report/v1"

// MaxBytes is the most a termination message holds.
const MaxBytes = termination.MaxBytes

// Report is the compact check report.
type Report struct {
	Schema        string  `json:"schema"`
	Rows          int64   `json:"rows"`
	ReferenceRows int64   `json:"referenceRows"`
	DataQuality   Quality `json:"dataQuality"`
	Drift         Drift   `json:"drift"`
	// Truncated says findings or features were left out to fit.
	Truncated bool `json:"truncated"`
}

// Quality is the data-quality answer and what broke it.
type Quality struct {
	OK       bool      `json:"ok"`
	Findings []Finding `json:"findings,omitempty"`
}

// Finding is one data-quality problem.
type Finding struct {
	Check   string   `json:"check"`
	Column  string   `json:"column,omitempty"`
	Count   int64    `json:"count"`
	Share   *float64 `json:"share,omitempty"`
	Limit   *float64 `json:"limit,omitempty"`
	Example string   `json:"example,omitempty"`
}

// Drift is the drift answer: how much of the features' weight the drifted
// features carry, against the limit at which the dataset counts as
// drifted, and the features that drifted.
type Drift struct {
	Detected      bool      `json:"detected"`
	DriftedWeight float64   `json:"driftedWeight"`
	Limit         float64   `json:"limit"`
	Features      []Feature `json:"features,omitempty"`
}

// Feature is one feature's drift figures.
type Feature struct {
	Feature   string   `json:"feature"`
	PSI       *float64 `json:"psi,omitempty"`
	PAdjusted *float64 `json:"pAdjusted,omitempty"`
	Drifted   bool     `json:"drifted"`
}

// Error is a report that cannot be used.
type Error struct {
	Reason, Message string
}

func (e *Error) Error() string { return e.Reason + ": " + e.Message }

// Reasons a report is refused.
const (
	ReasonMissing       = "CheckReportMissing"
	ReasonTooLarge      = "CheckReportTooLarge"
	ReasonMalformed     = "CheckReportMalformed"
	ReasonUnknownSchema = "CheckReportUnknownSchema"
)

func refuse(reason, format string, args ...any) *Error {
	return &Error{reason, fmt.Sprintf(format, args...)}
}

// Parse reads and checks a termination message.
func Parse(raw []byte) (*Report, error) {
	var r Report
	switch problem, msg := termination.Decode(raw, "check report", &r); problem {
	case termination.Missing:
		return nil, refuse(ReasonMissing, "the check container wrote no report to its termination message")
	case termination.TooLarge:
		return nil, refuse(ReasonTooLarge, "%s", msg)
	case termination.Malformed:
		return nil, refuse(ReasonMalformed, "%s", msg)
	}
	if r.Schema != Schema {
		return nil, refuse(ReasonUnknownSchema, "schema %q is not %q", r.Schema, Schema)
	}
	switch {
	case r.Rows < 0 || r.ReferenceRows < 0:
		return nil, refuse(ReasonMalformed, "negative row counts")
	case !r.DataQuality.OK && len(r.DataQuality.Findings) == 0 && !r.Truncated:
		return nil, refuse(ReasonMalformed, "dataQuality is not ok but lists no finding")
	case r.Drift.DriftedWeight < 0 || r.Drift.DriftedWeight > 1:
		return nil, refuse(ReasonMalformed, "drift.driftedWeight %v is not a part of the whole (0 to 1)", r.Drift.DriftedWeight)
	case r.Drift.Limit < 0 || r.Drift.Limit > 1:
		return nil, refuse(ReasonMalformed, "drift.limit %v is not a part of the whole (0 to 1)", r.Drift.Limit)
	}
	isShare := func(p *float64) bool { return p == nil || *p >= 0 && *p <= 1 }
	for i, f := range r.DataQuality.Findings {
		at := fmt.Sprintf("dataQuality.findings[%d]", i)
		switch {
		case f.Check == "":
			return nil, refuse(ReasonMalformed, "%s has no check name", at)
		case f.Count < 0:
			return nil, refuse(ReasonMalformed, "%s.count is %d", at, f.Count)
		case !isShare(f.Share):
			return nil, refuse(ReasonMalformed, "%s.share %v is not a share", at, *f.Share)
		case !isShare(f.Limit):
			return nil, refuse(ReasonMalformed, "%s.limit %v is not a share", at, *f.Limit)
		}
	}
	for i, f := range r.Drift.Features {
		at := fmt.Sprintf("drift.features[%d]", i)
		switch {
		case f.Feature == "":
			return nil, refuse(ReasonMalformed, "%s has no feature name", at)
		case f.PSI != nil && *f.PSI < 0:
			return nil, refuse(ReasonMalformed, "%s.psi is %v; PSI is never negative", at, *f.PSI)
		case !isShare(f.PAdjusted):
			return nil, refuse(ReasonMalformed, "%s.pAdjusted %v is not a probability", at, *f.PAdjusted)
		}
	}
	return &r, nil
}

// Encode writes the report as compact JSON within MaxBytes: when it does
// not fit, drifted features and then findings are dropped from the end (the
// caller lists the most telling first) and Truncated is set. The answers
// themselves (ok, detected, rows) are never dropped.
func Encode(r *Report) ([]byte, error) {
	fit := *r
	fit.DataQuality.Findings = append([]Finding(nil), r.DataQuality.Findings...)
	fit.Drift.Features = append([]Feature(nil), r.Drift.Features...)
	for {
		b, err := json.Marshal(&fit)
		if err != nil {
			return nil, fmt.Errorf("encode check report: %w", err)
		}
		if len(b) <= MaxBytes {
			return b, nil
		}
		fit.Truncated = true
		switch {
		case len(fit.Drift.Features) > 0:
			fit.Drift.Features = fit.Drift.Features[:len(fit.Drift.Features)-1]
		case len(fit.DataQuality.Findings) > 0:
			fit.DataQuality.Findings = fit.DataQuality.Findings[:len(fit.DataQuality.Findings)-1]
		default:
			return nil, fmt.Errorf("encode check report: %d bytes with no findings or features left; this is a bug", len(b))
		}
	}
}
