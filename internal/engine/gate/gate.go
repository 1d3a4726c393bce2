// Package gate decides whether a candidate passes a line's gate, from the
// numbers in its evaluation report and the line's criteria. It is a pure
// function: the same report and criteria always give the same verdict.
package gate

import (
	"fmt"
	"sort"
	"strconv"
	"strings"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/contract/gatereport"
	"plumbline.dev/plumbline/internal/engine/text"
)

// Verdict reasons.
const (
	ReasonCriteriaMet    = "CriteriaMet"
	ReasonCriteriaNotMet = "CriteriaNotMet"
	ReasonMustPassFailed = "MustPassFailed"
)

// DefaultConfidence is the confidence of a criterion that sets none (the
// API server defaults it too; this covers objects written before).
const DefaultConfidence = 0.95

// maxResults bounds the per-criterion results kept in status.
const maxResults = 200

// Decide judges a report against criteria. hasBaseline says whether a live
// version was there to compare with; without one, maxRegression cannot be
// judged and is recorded as not applied.
func Decide(criteria []v1alpha1.GateCriterion, rep *gatereport.Report, hasBaseline bool) v1alpha1.GateResult {
	res := v1alpha1.GateResult{Rows: rep.Rows, MustPassFailed: int32(min(rep.MustPass.Failed, 1<<30))}
	segments := reportSegments(rep)
	var failed []string
	for _, c := range criteria {
		for _, r := range judge(c, rep, segments, hasBaseline) {
			if !r.Passed {
				failed = append(failed, describe(r))
			}
			res.Criteria = append(res.Criteria, r)
		}
	}
	dropped := 0
	if len(res.Criteria) > maxResults {
		// Keep every failure first, then as many passes as fit.
		sort.SliceStable(res.Criteria, func(i, j int) bool { return !res.Criteria[i].Passed && res.Criteria[j].Passed })
		dropped = len(res.Criteria) - maxResults
		res.Criteria = res.Criteria[:maxResults]
	}

	switch {
	case rep.MustPass.Failed > 0:
		res.Verdict, res.Reason = v1alpha1.GateFailed, ReasonMustPassFailed
		msg := fmt.Sprintf("the candidate got %d of %d must-pass rows wrong", rep.MustPass.Failed, rep.MustPass.Total)
		if len(rep.MustPass.FailedIDs) > 0 {
			ids := rep.MustPass.FailedIDs
			if len(ids) > 10 {
				ids = ids[:10]
			}
			msg += " (ids: " + strings.Join(ids, ", ") + ")"
		}
		if len(failed) > 0 {
			msg += fmt.Sprintf("; %d criteria not met: %s", len(failed), strings.Join(failed, "; "))
		}
		res.Message = msg
	case len(failed) > 0:
		res.Verdict, res.Reason = v1alpha1.GateFailed, ReasonCriteriaNotMet
		res.Message = fmt.Sprintf("%d of %d criteria not met: %s", len(failed), len(res.Criteria)+dropped, strings.Join(failed, "; "))
	default:
		res.Verdict, res.Reason = v1alpha1.GatePassed, ReasonCriteriaMet
		res.Message = fmt.Sprintf("all %d criteria met on %d rows", len(res.Criteria)+dropped, rep.Rows)
		if rep.MustPass.Total > 0 {
			res.Message += fmt.Sprintf("; all %d must-pass rows right", rep.MustPass.Total)
		}
	}
	if dropped > 0 {
		res.Message += fmt.Sprintf(" (%d passing results not listed)", dropped)
	}
	res.Message = text.Truncate(res.Message, 4000)
	return res
}

// reportSegments lists the named segments the report has, for any metric.
func reportSegments(rep *gatereport.Report) []string {
	set := map[string]bool{}
	for _, m := range rep.Metrics {
		if m.Segment != "" {
			set[m.Segment] = true
		}
	}
	out := make([]string, 0, len(set))
	for s := range set {
		out = append(out, s)
	}
	sort.Strings(out)
	return out
}

func find(rep *gatereport.Report, metric, segment string) *gatereport.Metric {
	for i := range rep.Metrics {
		if rep.Metrics[i].Metric == metric && rep.Metrics[i].Segment == segment {
			return &rep.Metrics[i]
		}
	}
	return nil
}

// judge returns one result per segment the criterion covers.
func judge(c v1alpha1.GateCriterion, rep *gatereport.Report, segments []string, hasBaseline bool) []v1alpha1.CriterionResult {
	if c.Segment != "*" {
		return []v1alpha1.CriterionResult{judgeOne(c, c.Segment, rep, hasBaseline)}
	}
	fail := func(msg string) []v1alpha1.CriterionResult {
		return []v1alpha1.CriterionResult{{Metric: c.Metric, Segment: "*", Passed: false, Message: msg}}
	}
	if rep.Truncated {
		return fail("the report was truncated to fit the termination message, so not every segment can be judged; evaluate with fewer segments or judge named segments")
	}
	if len(segments) == 0 {
		return fail("the criterion asks for every segment (*) but the report has no segments")
	}
	out := make([]v1alpha1.CriterionResult, 0, len(segments))
	for _, s := range segments {
		out = append(out, judgeOne(c, s, rep, hasBaseline))
	}
	return out
}

func judgeOne(c v1alpha1.GateCriterion, segment string, rep *gatereport.Report, hasBaseline bool) v1alpha1.CriterionResult {
	r := v1alpha1.CriterionResult{Metric: c.Metric, Segment: segment}
	m := find(rep, c.Metric, segment)
	if m == nil {
		r.Message = fmt.Sprintf("the report has no %s for %s", c.Metric, segmentName(segment))
		if rep.Truncated && segment != "" {
			r.Message += " (it was truncated)"
		}
		return r
	}
	r.Candidate, r.Baseline = format(m.Candidate), format(m.Baseline)
	r.DeltaLow, r.DeltaHigh = format(m.DeltaLow), format(m.DeltaHigh)
	if m.Candidate == nil {
		r.Message = fmt.Sprintf("%s is undefined for %s: %s", c.Metric, segmentName(segment), m.Undefined)
		return r
	}
	cand := *m.Candidate
	var parts []string
	ok := true
	check := func(pass bool, msg string) {
		ok = ok && pass
		parts = append(parts, msg)
	}
	if c.Minimum != nil {
		check(cand >= *c.Minimum, fmt.Sprintf("%s %s %s minimum %s", c.Metric, num(cand), cmp(cand >= *c.Minimum, ">=", "<"), num(*c.Minimum)))
	}
	if c.Maximum != nil {
		check(cand <= *c.Maximum, fmt.Sprintf("%s %s %s maximum %s", c.Metric, num(cand), cmp(cand <= *c.Maximum, "<=", ">"), num(*c.Maximum)))
	}
	if c.MaxRegression != nil {
		if !hasBaseline {
			parts = append(parts, "maxRegression not applied: the line had no live version to compare with")
		} else {
			pass, msg := nonInferior(c, m)
			check(pass, msg)
		}
	}
	r.Passed = ok
	r.Message = text.Truncate(strings.Join(parts, "; "), 1000)
	return r
}

// nonInferior judges maxRegression: the end of the difference's interval on
// the side of "worse" must not pass -maxRegression (or +maxRegression for a
// metric where lower is better), at a confidence at least the criterion's.
func nonInferior(c v1alpha1.GateCriterion, m *gatereport.Metric) (bool, string) {
	want := DefaultConfidence
	if c.Confidence != nil {
		want = *c.Confidence
	}
	if m.Confidence == nil {
		return false, fmt.Sprintf("the report gives no confidence for %s's interval", c.Metric)
	}
	if *m.Confidence < want {
		return false, fmt.Sprintf("the report's interval for %s is at %s confidence; the criterion asks for %s", c.Metric, pct(*m.Confidence), pct(want))
	}
	maxReg := *c.MaxRegression
	if c.EffectiveBetter() == v1alpha1.LowerBetter {
		if m.DeltaHigh == nil {
			return false, fmt.Sprintf("the report gives no deltaHigh for %s%s", c.Metric, rowsNote(m))
		}
		hi := *m.DeltaHigh
		return hi <= maxReg, fmt.Sprintf("upper bound of the change in %s %s %s %s (maxRegression, %s)", c.Metric, num(hi), cmp(hi <= maxReg, "<=", ">"), num(maxReg), pct(*m.Confidence))
	}
	if m.DeltaLow == nil {
		return false, fmt.Sprintf("the report gives no deltaLow for %s%s", c.Metric, rowsNote(m))
	}
	lo := *m.DeltaLow
	return lo >= -maxReg, fmt.Sprintf("lower bound of the change in %s %s %s %s (maxRegression, %s)", c.Metric, num(lo), cmp(lo >= -maxReg, ">=", "<"), num(-maxReg), pct(*m.Confidence))
}

// rowsNote says how many rows a metric had, when the report says: an
// interval missing for a handful of rows is no surprise.
func rowsNote(m *gatereport.Metric) string {
	if m.N <= 0 {
		return ""
	}
	return fmt.Sprintf(" (%d rows)", m.N)
}

func describe(r v1alpha1.CriterionResult) string {
	return fmt.Sprintf("%s/%s: %s", r.Metric, segmentName(r.Segment), r.Message)
}

func segmentName(s string) string {
	switch s {
	case "":
		return "whole set"
	case "*":
		return "every segment"
	}
	return "segment " + strconv.Quote(s)
}

func cmp(ok bool, yes, no string) string {
	if ok {
		return yes
	}
	return no
}

func num(v float64) string { return strconv.FormatFloat(v, 'g', 6, 64) }

func pct(v float64) string { return strconv.FormatFloat(v*100, 'g', 4, 64) + "%" }

func format(v *float64) string {
	if v == nil {
		return ""
	}
	return num(*v)
}
