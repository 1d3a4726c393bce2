// Package gatereport is the contract between an evaluation Job and the
// controller: the compact JSON report the Job's last container writes to its
// termination message. The evaluator measures; the controller decides from the
// numbers, so nothing in a report is an opinion about promotion.
//
// Parsing is strict: an unknown field, a missing required number or a value
// out of its range makes the report malformed, because a typo that silently
// dropped a number could otherwise pass a candidate.
package gatereport

import (
	"encoding/json"
	"fmt"
	"math"
	"strconv"

	"plumbline.dev/plumbline/internal/contract/termination"
)

// Schema identifies version 1 of the gate report.
const Schema = "plumbline.dev/gate-report/v1"

// MaxBytes is the most a termination message holds.
const MaxBytes = termination.MaxBytes

// Report is the compact gate report.
type Report struct {
	// Schema must be Schema.
	Schema string `json:"schema"`
	// Rows of the golden set evaluated.
	Rows int64 `json:"rows"`
	// Metrics per metric and segment; segment "" is the whole set.
	Metrics []Metric `json:"metrics"`
	// MustPass counts the rows the candidate must get right.
	MustPass MustPass `json:"mustPass"`
	// Truncated says segment rows were dropped to fit MaxBytes.
	Truncated bool `json:"truncated"`
}

// Metric is one metric for one segment, candidate against baseline.
type Metric struct {
	Metric  string `json:"metric"`
	Segment string `json:"segment"`
	// Candidate and Baseline are the metric's values; nil when undefined.
	Candidate *float64 `json:"candidate"`
	Baseline  *float64 `json:"baseline,omitempty"`
	// Delta is Candidate - Baseline; DeltaLow and DeltaHigh bound it at
	// Confidence.
	Delta      *float64 `json:"delta,omitempty"`
	DeltaLow   *float64 `json:"deltaLow,omitempty"`
	DeltaHigh  *float64 `json:"deltaHigh,omitempty"`
	Confidence *float64 `json:"confidence,omitempty"`
	PValue     *float64 `json:"pValue,omitempty"`
	// Test names the paired test behind the interval, for example mcnemar.
	Test string `json:"test,omitempty"`
	// N is the number of rows behind the metric.
	N int64 `json:"n,omitempty"`
	// Undefined says why the metric could not be computed (one class only
	// in a segment, say); Candidate is then nil.
	Undefined string `json:"undefined,omitempty"`
}

// MustPass counts the must-pass rows.
type MustPass struct {
	Total  int64 `json:"total"`
	Failed int64 `json:"failed"`
	// FailedIDs lists some of the failed rows' ids.
	FailedIDs []string `json:"failedIds,omitempty"`
}

// Reasons a report is refused. Each rejects the candidate.
const (
	ReasonMissing       = "ReportMissing"
	ReasonTooLarge      = "ReportTooLarge"
	ReasonMalformed     = "ReportMalformed"
	ReasonUnknownSchema = "ReportUnknownSchema"
)

// Error is a report that cannot be used, with the reason it is refused.
type Error struct {
	Reason  string
	Message string
}

func (e *Error) Error() string { return e.Reason + ": " + e.Message }

func refuse(reason, format string, args ...any) *Error {
	return &Error{Reason: reason, Message: fmt.Sprintf(format, args...)}
}

// Parse reads and checks a termination message. A nil error means every
// number the controller may judge is present and in range.
func Parse(raw []byte) (*Report, error) {
	var r Report
	switch problem, msg := termination.Decode(raw, "gate report", &r); problem {
	case termination.Missing:
		return nil, refuse(ReasonMissing, "the evaluation container wrote no report to its termination message")
	case termination.TooLarge:
		return nil, refuse(ReasonTooLarge, "%s", msg)
	case termination.Malformed:
		return nil, refuse(ReasonMalformed, "%s", msg)
	}
	if r.Schema != Schema {
		return nil, refuse(ReasonUnknownSchema, "schema %q is not %q", r.Schema, Schema)
	}
	if err := r.check(); err != nil {
		return nil, err
	}
	return &r, nil
}

func (r *Report) check() *Error {
	if r.Rows <= 0 {
		return refuse(ReasonMalformed, "rows is %d; a report covers at least one row", r.Rows)
	}
	if len(r.Metrics) == 0 {
		return refuse(ReasonMalformed, "the report has no metrics")
	}
	if r.MustPass.Total < 0 || r.MustPass.Failed < 0 || r.MustPass.Failed > r.MustPass.Total {
		return refuse(ReasonMalformed, "mustPass is %d failed of %d", r.MustPass.Failed, r.MustPass.Total)
	}
	seen := map[[2]string]bool{}
	for i, m := range r.Metrics {
		at := fmt.Sprintf("metrics[%d]", i)
		if m.Metric == "" {
			return refuse(ReasonMalformed, "%s has no metric name", at)
		}
		key := [2]string{m.Metric, m.Segment}
		if seen[key] {
			return refuse(ReasonMalformed, "%s repeats metric %q for segment %q", at, m.Metric, m.Segment)
		}
		seen[key] = true
		if m.Candidate == nil && m.Undefined == "" {
			return refuse(ReasonMalformed, "%s (%s) has no candidate value and does not say why it is undefined", at, m.Metric)
		}
		for name, v := range map[string]*float64{"candidate": m.Candidate, "baseline": m.Baseline, "delta": m.Delta, "deltaLow": m.DeltaLow, "deltaHigh": m.DeltaHigh, "pValue": m.PValue} {
			if v != nil && (math.IsNaN(*v) || math.IsInf(*v, 0)) {
				return refuse(ReasonMalformed, "%s.%s is not a finite number", at, name)
			}
		}
		if c := m.Confidence; c != nil && (*c <= 0 || *c >= 1) {
			return refuse(ReasonMalformed, "%s.confidence is %v; it must be strictly between 0 and 1", at, *c)
		}
		if p := m.PValue; p != nil && (*p < 0 || *p > 1) {
			return refuse(ReasonMalformed, "%s.pValue is %v; it must be between 0 and 1", at, *p)
		}
		if m.DeltaLow != nil && m.DeltaHigh != nil && *m.DeltaLow > *m.DeltaHigh {
			return refuse(ReasonMalformed, "%s.deltaLow (%v) is above deltaHigh (%v)", at, *m.DeltaLow, *m.DeltaHigh)
		}
		if m.N < 0 {
			return refuse(ReasonMalformed, "%s.n is negative", at)
		}
		if err := m.consistent(at); err != nil {
			return err
		}
	}
	return nil
}

// consistent checks that a metric's numbers agree with each other: delta is
// candidate - baseline, and the interval contains it. The gate judges the
// interval, so a report whose interval contradicts its own values cannot
// be judged. The tolerance allows for the six significant digits plumbline
// evaluate keeps (each value off by at most half a unit in its sixth digit).
func (m *Metric) consistent(at string) *Error {
	if m.Candidate == nil {
		return nil
	}
	if m.Baseline == nil {
		switch {
		case m.Delta != nil:
			return refuse(ReasonMalformed, "%s gives delta %s but no baseline; a difference needs the baseline's value", at, num(*m.Delta))
		case m.DeltaLow != nil || m.DeltaHigh != nil:
			return refuse(ReasonMalformed, "%s gives an interval for the difference but no baseline", at)
		}
		return nil
	}
	c, b := *m.Candidate, *m.Baseline
	diff := c - b
	tol := 2e-5*math.Max(math.Abs(c), math.Abs(b)) + 1e-12
	est, what := diff, " (candidate - baseline)"
	if m.Delta != nil {
		if math.Abs(*m.Delta-diff) > tol {
			return refuse(ReasonMalformed, "%s.delta is %s, but candidate - baseline is %s - %s = %s", at, num(*m.Delta), num(c), num(b), num(diff))
		}
		est, what = *m.Delta, ""
	}
	lo, hi := m.DeltaLow, m.DeltaHigh
	switch {
	case lo != nil && hi != nil && (est < *lo-tol || est > *hi+tol):
		return refuse(ReasonMalformed, "%s: the interval [%s, %s] does not contain delta %s%s", at, num(*lo), num(*hi), num(est), what)
	case lo != nil && est < *lo-tol:
		return refuse(ReasonMalformed, "%s.deltaLow %s is above delta %s%s", at, num(*lo), num(est), what)
	case hi != nil && est > *hi+tol:
		return refuse(ReasonMalformed, "%s.deltaHigh %s is below delta %s%s", at, num(*hi), num(est), what)
	}
	return nil
}

func num(v float64) string { return strconv.FormatFloat(v, 'g', 6, 64) }

// Encode writes the report as compact JSON.
func Encode(r *Report) ([]byte, error) {
	b, err := json.Marshal(r)
	if err != nil {
		return nil, fmt.Errorf("encode gate report: %w", err)
	}
	return b, nil
}
