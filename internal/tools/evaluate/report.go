package evaluate

import (
	"fmt"
	"io"
	"math"
	"sort"
	"strconv"
	"strings"
	"text/tabwriter"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/contract/gatereport"
	"plumbline.dev/plumbline/internal/tools/outfile"
)

// ReportSchema identifies version 1 of the full evaluation report.
const ReportSchema = "plumbline.dev/evaluation-report/v1"

// Report is the full evaluation report (--out).
type Report struct {
	Schema          string        `json:"schema"`
	Input           string        `json:"input"`
	Task            string        `json:"task"`
	Threshold       *float64      `json:"threshold,omitempty"`
	Classes         []string      `json:"classes,omitempty"`
	Rows            int           `json:"rows"`
	Confidence      float64       `json:"confidence"`
	MaxRegression   float64       `json:"maxRegression"`
	Bootstrap       BootstrapInfo `json:"bootstrap"`
	MultipleTesting string        `json:"multipleTesting"`
	Groups          []GroupReport `json:"groups"`
	MustPass        MustPass      `json:"mustPass"`
	// Warnings say what in the input makes some figures mean less than
	// they seem.
	Warnings []string `json:"warnings,omitempty"`
}

// BootstrapInfo says how the paired bootstrap was run.
type BootstrapInfo struct {
	Resamples int    `json:"resamples"`
	Seed      uint64 `json:"seed"`
	MaxRows   int    `json:"maxRows"`
	Method    string `json:"method"`
}

// GroupReport is the whole set (segment "") or one segment.
type GroupReport struct {
	Segment string         `json:"segment"`
	Rows    int            `json:"rows"`
	Metrics []MetricReport `json:"metrics"`
}

// MetricReport is one metric: the gate report's fields and the raw tests.
type MetricReport struct {
	Metric            string      `json:"metric"`
	Segment           string      `json:"segment"`
	Better            string      `json:"better"`
	Candidate         *float64    `json:"candidate"`
	Baseline          *float64    `json:"baseline"`
	Undefined         string      `json:"undefined,omitempty"`
	BaselineUndefined string      `json:"baselineUndefined,omitempty"`
	Delta             *float64    `json:"delta"`
	DeltaLow          *float64    `json:"deltaLow"`
	DeltaHigh         *float64    `json:"deltaHigh"`
	Confidence        float64     `json:"confidence"`
	PValue            *float64    `json:"pValue"`
	PValueAdjusted    *float64    `json:"pValueAdjusted,omitempty"`
	Test              string      `json:"test"`
	N                 int         `json:"n"`
	CandidateInterval *[2]float64 `json:"candidateInterval,omitempty"`
	BaselineInterval  *[2]float64 `json:"baselineInterval,omitempty"`
	NonInferior       *bool       `json:"nonInferior,omitempty"`
	PairedTests       PairedTests `json:"pairedTests"`
}

// PairedTests holds the raw figures of each paired test run.
type PairedTests struct {
	McNemar   *McNemarReport   `json:"mcnemar,omitempty"`
	DeLong    *DeLongReport    `json:"delong,omitempty"`
	Bootstrap *BootstrapReport `json:"bootstrap,omitempty"`
}

// McNemarReport is McNemar's test: b rows only the candidate got right, c
// rows only the baseline did.
type McNemarReport struct {
	B         int64   `json:"b"`
	C         int64   `json:"c"`
	Statistic float64 `json:"statistic"`
	PValue    float64 `json:"pValue"`
	Exact     bool    `json:"exact"`
}

// DeLongReport is DeLong's test of the two ROC AUCs.
type DeLongReport struct {
	AUCCandidate float64 `json:"aucCandidate"`
	AUCBaseline  float64 `json:"aucBaseline"`
	VarCandidate float64 `json:"varCandidate"`
	VarBaseline  float64 `json:"varBaseline"`
	Covariance   float64 `json:"covariance"`
	// Z is null when the difference's variance is zero (a tiny segment
	// whose rows all rank alike): it is then infinite, which JSON cannot
	// hold; the p-value says the same.
	Z      *float64 `json:"z"`
	PValue float64  `json:"pValue"`
}

// BootstrapReport is the paired bootstrap of the difference.
type BootstrapReport struct {
	Low       *float64 `json:"low"`
	High      *float64 `json:"high"`
	PValue    *float64 `json:"pValue"`
	Resamples int      `json:"resamples"`
	Rows      int      `json:"rows"`
	// Undefined says why there is no interval.
	Undefined string `json:"undefined,omitempty"`
}

// MustPass counts the must-pass rows.
type MustPass struct {
	Total     int      `json:"total"`
	Failed    int      `json:"failed"`
	FailedIDs []string `json:"failedIds,omitempty"`
}

func num(v float64) *float64 {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return nil
	}
	return &v
}

// round keeps six significant digits, for the compact report.
func round(p *float64) *float64 {
	if p == nil {
		return nil
	}
	v, _ := strconv.ParseFloat(strconv.FormatFloat(*p, 'g', 6, 64), 64)
	return &v
}

// Build assembles the full report.
func Build(input string, ds *Dataset, s Settings, groups []GroupResult, failed []string) Report {
	r := Report{Schema: ReportSchema, Input: input, Task: ds.Task, Rows: ds.N, Confidence: s.Confidence, MaxRegression: s.MaxRegression,
		Bootstrap:       BootstrapInfo{Resamples: s.Bootstrap.Resamples, Seed: s.Bootstrap.Seed, MaxRows: s.Bootstrap.MaxRows},
		MultipleTesting: "Holm's correction across segments, per metric: pValueAdjusted (the whole set is its own test)",
		MustPass:        MustPass{Total: len(ds.MustPass), Failed: len(failed), FailedIDs: failed}}
	if ds.Task == Binary {
		r.Threshold = &s.Threshold
		for _, m := range []struct {
			name   string
			scores []float64
		}{{"candidate", ds.Cand}, {"baseline", ds.Base}} {
			if hardPredictions(m.scores) {
				r.Warnings = append(r.Warnings, fmt.Sprintf("the %s's scores are all 0 or 1: hard predictions, not probabilities; log_loss and brier score them as certainties (one mistake costs log loss about 36), and roc_auc and average_precision rank only two values", m.name))
			}
		}
	}
	if ds.Task == Multiclass {
		r.Classes = ds.Classes
	}
	r.Bootstrap.Method = "paired, all rows of each group"
	for _, g := range groups {
		if s.Bootstrap.MaxRows > 0 && g.Rows > s.Bootstrap.MaxRows {
			r.Bootstrap.Method = fmt.Sprintf("paired; groups over %d rows are resampled from a seeded subsample of that size, the spread scaled by sqrt(m/n) (m-out-of-n bootstrap)", s.Bootstrap.MaxRows)
		}
	}
	for _, g := range groups {
		gr := GroupReport{Segment: g.Segment, Rows: g.Rows}
		for _, res := range g.Results {
			gr.Metrics = append(gr.Metrics, metricReport(g.Segment, res, s))
		}
		r.Groups = append(r.Groups, gr)
	}
	return r
}

func metricReport(segment string, res Result, s Settings) MetricReport {
	dir, _ := v1alpha1.KnownBetter(res.Metric)
	m := MetricReport{Metric: res.Metric, Segment: segment, Better: string(dir), Candidate: num(res.Cand.V), Baseline: num(res.Base.V),
		Undefined: res.Cand.Undefined, BaselineUndefined: res.Base.Undefined, Delta: num(res.Delta), DeltaLow: num(res.Low), DeltaHigh: num(res.High),
		Confidence: s.Confidence, PValue: num(res.P), PValueAdjusted: num(res.PAdjusted), Test: res.Test, N: res.N,
		CandidateInterval: res.CandCI, BaselineInterval: res.BaseCI}
	if ok, known := NonInferior(res.Metric, res.Low, res.High, s.MaxRegression); known {
		m.NonInferior = &ok
	}
	if mc := res.McNemar; mc != nil {
		m.PairedTests.McNemar = &McNemarReport{B: mc.B, C: mc.C, Statistic: mc.Statistic, PValue: mc.PValue, Exact: mc.Exact}
	}
	if d := res.DeLong; d != nil {
		m.PairedTests.DeLong = &DeLongReport{AUCCandidate: d.AUCA, AUCBaseline: d.AUCB, VarCandidate: d.VarA, VarBaseline: d.VarB, Covariance: d.Cov, Z: num(d.Z), PValue: d.PValue}
	}
	if b := res.Boot; b != nil {
		m.PairedTests.Bootstrap = &BootstrapReport{Low: num(b.Low), High: num(b.High), PValue: num(b.P), Resamples: b.Resamples, Rows: b.Rows, Undefined: b.Undefined}
	}
	return m
}

// Selection says which rows go into the compact gate report.
type Selection struct {
	// Metrics to include; empty means every metric.
	Metrics []string
	// Segments: AllSegments, none (nil and not All), or the names listed.
	All      bool
	Segments []string
}

func (sel Selection) metric(name string) bool {
	if len(sel.Metrics) == 0 {
		return true
	}
	for _, m := range sel.Metrics {
		if m == name {
			return true
		}
	}
	return false
}

func (sel Selection) segment(name string) bool {
	if sel.All {
		return true
	}
	for _, s := range sel.Segments {
		if s == name {
			return true
		}
	}
	return false
}

// Compact builds the gate report of the contract: the whole set's rows
// first, then the segments', and, when the whole does not fit in a
// termination message, drops segment rows from the end first, then others,
// and says it was truncated.
func Compact(r Report, sel Selection) ([]byte, *gatereport.Report, error) {
	c := &gatereport.Report{Schema: gatereport.Schema, Rows: int64(r.Rows),
		MustPass: gatereport.MustPass{Total: int64(r.MustPass.Total), Failed: int64(r.MustPass.Failed)}}
	failed := r.MustPass.FailedIDs
	if len(failed) > 10 {
		failed = failed[:10]
	}
	c.MustPass.FailedIDs = failed
	var whole, segs []gatereport.Metric
	for _, g := range r.Groups {
		if g.Segment != "" && !sel.segment(g.Segment) {
			continue
		}
		for _, m := range g.Metrics {
			if !sel.metric(m.Metric) {
				continue
			}
			gm := gatereport.Metric{Metric: m.Metric, Segment: m.Segment, Candidate: round(m.Candidate), Baseline: round(m.Baseline),
				Delta: round(m.Delta), DeltaLow: round(m.DeltaLow), DeltaHigh: round(m.DeltaHigh), PValue: round(m.PValue),
				Test: m.Test, N: int64(m.N)}
			if m.Candidate == nil {
				gm.Undefined = m.Undefined
				if gm.Undefined == "" {
					gm.Undefined = "not computed"
				}
			}
			if m.DeltaLow != nil {
				conf := m.Confidence
				gm.Confidence = &conf
			}
			if g.Segment == "" {
				whole = append(whole, gm)
			} else {
				segs = append(segs, gm)
			}
		}
	}
	rows := append(whole, segs...)
	for {
		c.Metrics = rows
		b, err := gatereport.Encode(c)
		if err != nil {
			return nil, nil, err
		}
		if len(b) <= gatereport.MaxBytes {
			return b, c, nil
		}
		if len(rows) <= 1 {
			return nil, nil, fmt.Errorf("the gate report does not fit in %d bytes even with one metric", gatereport.MaxBytes)
		}
		rows = rows[:len(rows)-1]
		c.Truncated = true
	}
}

// WriteJSON writes the full report, indented.
func WriteJSON(w io.Writer, r Report) error { return outfile.JSON(w, r) }

func fmtNum(p *float64) string {
	if p == nil {
		return "-"
	}
	return strconv.FormatFloat(*p, 'g', 4, 64)
}

// WriteTable prints the report as a person reads it.
func WriteTable(w io.Writer, r Report) error { return writeTable(w, r, false) }

// WriteTableWithVerdicts is WriteTable with a column for each difference's
// non-inferiority verdict against the report's maxRegression (what a person
// who gave --max-regression asked about).
func WriteTableWithVerdicts(w io.Writer, r Report) error { return writeTable(w, r, true) }

func writeTable(w io.Writer, r Report, verdicts bool) error {
	fmt.Fprintf(w, "%s: %d rows, task %s", r.Input, r.Rows, r.Task)
	if r.Threshold != nil {
		fmt.Fprintf(w, ", threshold %g", *r.Threshold)
	}
	fmt.Fprintf(w, "; intervals at %g%%, %d paired bootstrap resamples\n", r.Confidence*100, r.Bootstrap.Resamples)
	for _, warn := range r.Warnings {
		fmt.Fprintf(w, "warning: %s\n", warn)
	}
	fmt.Fprintln(w)
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	head := "SEGMENT\tMETRIC\tBETTER\tCANDIDATE\tBASELINE\tDELTA\tINTERVAL\tP\tTEST\tROWS"
	if verdicts {
		head += "\tNON-INFERIOR"
	}
	fmt.Fprintln(tw, head)
	for _, g := range r.Groups {
		seg := g.Segment
		if seg == "" {
			seg = "(all)"
		}
		for _, m := range g.Metrics {
			interval := "-"
			if m.DeltaLow != nil && m.DeltaHigh != nil {
				interval = "[" + fmtNum(m.DeltaLow) + ", " + fmtNum(m.DeltaHigh) + "]"
			}
			p := fmtNum(m.PValue)
			if seg != "(all)" && m.PValueAdjusted != nil {
				p += " (" + fmtNum(m.PValueAdjusted) + " adj.)"
			}
			cand := fmtNum(m.Candidate)
			if m.Candidate == nil {
				cand = "undefined"
			}
			row := fmt.Sprintf("%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%d", seg, m.Metric, strings.ToLower(m.Better), cand, fmtNum(m.Baseline), fmtNum(m.Delta), interval, p, m.Test, m.N)
			if verdicts {
				row += "\t" + verdictText(m.NonInferior)
			}
			fmt.Fprintln(tw, row)
		}
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	if verdicts {
		fmt.Fprintf(w, "\nnon-inferior: the interval of the difference stays within %g of the baseline on the side that is worse (BETTER says which way is better)\n", r.MaxRegression)
	}
	var undefined []string
	for _, g := range r.Groups {
		for _, m := range g.Metrics {
			if m.Undefined != "" {
				undefined = append(undefined, fmt.Sprintf("%s/%s: %s", segName(g.Segment), m.Metric, m.Undefined))
			}
		}
	}
	sort.Strings(undefined)
	if len(undefined) > 0 {
		fmt.Fprintf(w, "\nundefined: %s\n", strings.Join(undefined, "; "))
	}
	fmt.Fprintf(w, "\nmust-pass rows: %d of %d wrong", r.MustPass.Failed, r.MustPass.Total)
	if len(r.MustPass.FailedIDs) > 0 {
		ids := r.MustPass.FailedIDs
		if len(ids) > 20 {
			ids = ids[:20]
		}
		fmt.Fprintf(w, " (%s)", strings.Join(ids, ", "))
	}
	fmt.Fprintln(w)
	return nil
}

func segName(s string) string {
	if s == "" {
		return "(all)"
	}
	return s
}

// hardPredictions says every score is exactly 0 or 1.
func hardPredictions(scores []float64) bool {
	for _, v := range scores {
		if v != 0 && v != 1 {
			return false
		}
	}
	return len(scores) > 0
}

// verdictText shows a non-inferiority verdict; "-" when there is none (no
// interval).
func verdictText(v *bool) string {
	switch {
	case v == nil:
		return "-"
	case *v:
		return "yes"
	}
	return "NO"
}
