package datacheck

import (
	"fmt"
	"io"
	"math"
	"sort"
	"strconv"
	"strings"
	"sync"
	"text/tabwriter"

	"plumbline.dev/plumbline/internal/contract/checkreport"
	"plumbline.dev/plumbline/internal/tools/outfile"
	"plumbline.dev/plumbline/internal/tools/stats"
)

// ReportSchema identifies version 1 of the full report.
const ReportSchema = "plumbline.dev/datacheck-report/v1"

// Report is the full report (--out).
type Report struct {
	Schema    string    `json:"schema"`
	Reference BatchInfo `json:"reference"`
	Current   BatchInfo `json:"current"`
	// ColumnSchema says where the column types came from.
	ColumnSchema string       `json:"columnSchema"`
	Settings     Settings     `json:"settings"`
	DataQuality  Quality      `json:"dataQuality"`
	Drift        DriftVerdict `json:"drift"`
	Columns      []Column     `json:"columns"`
	Notes        []string     `json:"notes,omitempty"`
	// Decided is the schema the check used: given, or inferred (and then
	// worth writing out for review).
	Decided  *Schema `json:"-"`
	Inferred bool    `json:"-"`
}

// BatchInfo describes one input file.
type BatchInfo struct {
	File          string `json:"file"`
	Rows          int64  `json:"rows"`
	MalformedRows int64  `json:"malformedRows"`
}

// Settings are the thresholds and methods used.
type Settings struct {
	Limits             Limits  `json:"limits"`
	Alpha              float64 `json:"alpha"`
	Correction         string  `json:"correction"`
	PSIThreshold       float64 `json:"psiThreshold"`
	PSIFloor           float64 `json:"psiFloor"`
	Bins               int     `json:"bins"`
	DriftedWeightLimit float64 `json:"driftedWeightLimit"`
	SampleSize         int     `json:"sampleSize"`
	Seed               uint64  `json:"seed"`
}

// Quality is the data-quality verdict.
type Quality struct {
	OK       bool      `json:"ok"`
	Findings []Finding `json:"findings"`
}

// Finding is one data-quality problem of the current batch.
type Finding struct {
	Check   string   `json:"check"`
	Column  string   `json:"column,omitempty"`
	Count   int64    `json:"count"`
	Share   *float64 `json:"share,omitempty"`
	Limit   *float64 `json:"limit,omitempty"`
	Example string   `json:"example,omitempty"`
	Message string   `json:"message"`
}

// Checks a finding can name.
const (
	CheckUnreadable     = "unreadable"
	CheckEmpty          = "empty"
	CheckTooFewRows     = "too_few_rows"
	CheckTruncated      = "truncated"
	CheckMalformedRows  = "malformed_rows"
	CheckMissingColumn  = "missing_column"
	CheckMissing        = "missing"
	CheckTypeErrors     = "type_errors"
	CheckOutOfRange     = "out_of_range"
	CheckUnseen         = "unseen_categories"
	CheckDuplicateRows  = "duplicate_rows"
	CheckDuplicateIDs   = "duplicate_ids"
	correctionBH        = "benjamini-hochberg"
	testKS              = "kolmogorov-smirnov"
	testChiSquare       = "chi-square"
	unseenBucket        = "(unseen)"
	maxUnseenInReport   = 10
	maxUnseenInMessages = 5
)

// DriftVerdict is the dataset-level drift verdict.
type DriftVerdict struct {
	Detected bool `json:"detected"`
	// DriftedWeight is the part of the features' weight the drifted ones
	// carry; the dataset has drifted when it reaches Limit.
	DriftedWeight float64  `json:"driftedWeight"`
	Limit         float64  `json:"limit"`
	Tested        int      `json:"tested"`
	Drifted       []string `json:"drifted"`
	Why           string   `json:"why,omitempty"`
}

// Column is one column's figures.
type Column struct {
	Name     string  `json:"name"`
	Type     string  `json:"type"`
	Required bool    `json:"required,omitempty"`
	Ignored  string  `json:"ignoredBecause,omitempty"`
	Weight   float64 `json:"weight,omitempty"`
	// Reference and Current are the column in each batch; Current is nil
	// when the current batch lacks the column.
	Reference Side         `json:"reference"`
	Current   *Side        `json:"current,omitempty"`
	Drift     *ColumnDrift `json:"drift,omitempty"`
}

// Side is a column's figures in one batch.
type Side struct {
	Rows         int64        `json:"rows"`
	Missing      int64        `json:"missing"`
	MissingShare float64      `json:"missingShare"`
	TypeErrors   int64        `json:"typeErrors,omitempty"`
	OutOfRange   int64        `json:"outOfRange,omitempty"`
	Unseen       int64        `json:"unseen,omitempty"`
	TopUnseen    []ValueCount `json:"topUnseen,omitempty"`
	Min          *float64     `json:"min,omitempty"`
	Max          *float64     `json:"max,omitempty"`
	// Sampled is how many of a numeric column's values the drift tests
	// used.
	Sampled int `json:"sampled,omitempty"`
}

// ValueCount is a value and how often it was seen.
type ValueCount struct {
	Value string `json:"value"`
	Count int64  `json:"count"`
}

// ColumnDrift is one feature's drift tests.
type ColumnDrift struct {
	Tested    bool     `json:"tested"`
	NotTested string   `json:"notTested,omitempty"`
	Test      string   `json:"test,omitempty"`
	Statistic *float64 `json:"statistic,omitempty"`
	DoF       int      `json:"dof,omitempty"`
	PValue    *float64 `json:"pValue,omitempty"`
	PAdjusted *float64 `json:"pAdjusted,omitempty"`
	// Exact says the KS p-value counts lattice paths exactly.
	Exact         bool     `json:"exact,omitempty"`
	PSI           *float64 `json:"psi,omitempty"`
	Wasserstein   *float64 `json:"wasserstein1,omitempty"`
	JensenShannon *float64 `json:"jensenShannon,omitempty"`
	Bins          []Bin    `json:"bins,omitempty"`
	Drifted       bool     `json:"drifted"`
	p             float64
}

// Bin is one bin of the PSI: a numeric bin holds values up to UpTo (the
// last, values above Above); a categorical bin is a category. Reference and
// Current are shares.
type Bin struct {
	UpTo      *float64 `json:"upTo,omitempty"`
	Above     *float64 `json:"above,omitempty"`
	Category  string   `json:"category,omitempty"`
	Reference float64  `json:"reference"`
	Current   float64  `json:"current"`
}

func num(x float64) *float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return nil
	}
	return &x
}

func share(n, of int64) float64 {
	if of == 0 {
		return 0
	}
	return float64(n) / float64(of)
}

// build turns the passes' figures into the report.
func build(res *result) (*Report, error) {
	o := res.opts
	r := &Report{Schema: ReportSchema,
		Reference: BatchInfo{File: o.Reference, Rows: res.ref.rows, MalformedRows: res.ref.malformed},
		Current:   BatchInfo{File: o.Current, Rows: res.cur.rows, MalformedRows: res.cur.malformed},
		Settings: Settings{Limits: o.Limits, Alpha: o.Alpha, Correction: correctionBH, PSIThreshold: o.PSIThreshold,
			PSIFloor: stats.PSIFloor, Bins: o.Bins, DriftedWeightLimit: o.DriftedWeightLimit, SampleSize: o.SampleSize, Seed: o.Seed},
		Decided: res.schema, Inferred: res.inferred}
	if res.inferred {
		r.ColumnSchema = "inferred from the reference"
	} else {
		r.ColumnSchema = "given: " + o.SchemaFile
	}
	if res.ref.malformed > 0 {
		r.Notes = append(r.Notes, fmt.Sprintf("the reference has %d malformed rows, left out (the first: %s)", res.ref.malformed, res.ref.firstMalformed))
	}
	if res.dup != nil && res.dup.stopped {
		r.Notes = append(r.Notes, fmt.Sprintf("duplicates were looked for in the first %d rows only", maxTracked))
	}
	for _, c := range res.schema.Columns {
		if c.Type == Ignore && res.ignored[c.Name] != "" {
			r.Notes = append(r.Notes, fmt.Sprintf("column %s is not checked for drift: %s", c.Name, res.ignored[c.Name]))
		}
	}
	if err := checkWeights(o.Weights, res.schema); err != nil {
		return nil, err
	}
	r.Columns = columns(res)
	r.DataQuality = quality(res, r.Columns)
	r.Drift = driftVerdict(res, r.Columns)
	for i, c := range res.schema.Columns {
		if c.Type == Categorical && !res.closed[i] {
			r.Notes = append(r.Notes, "categories not listed in a schema are taken from the reference and left open: a new value counts as drift, not as a quality finding; list a column's categories in the schema to close it")
			break
		}
	}
	r.Notes = append(r.Notes, fmt.Sprintf("KS, Wasserstein-1 and the numeric PSI use a uniform random sample of at most %d values per column and batch (reservoir sampling, seed %d): "+
		"the KS p-value is exact while both samples hold at most %d values and asymptotic above (SciPy's ks_2samp default), with the power of that many rows; counts of missing, wrong, out-of-range, unseen and duplicate values are over every row", o.SampleSize, o.Seed, stats.KSExactUpTo))
	return r, nil
}

func checkWeights(w map[string]float64, s *Schema) error {
	var features []string
	ok := map[string]bool{}
	for _, c := range s.Columns {
		if c.Type != Ignore {
			features = append(features, c.Name)
			ok[c.Name] = true
		}
	}
	for name := range w {
		if !ok[name] {
			return inputErr("--weights: %q is not a feature tested for drift; the features are %s", name, strings.Join(features, ", "))
		}
	}
	return nil
}

// columns gathers each column's figures and runs the drift tests, the
// columns in parallel.
func columns(res *result) []Column {
	o := res.opts
	out := make([]Column, len(res.schema.Columns))
	var wg sync.WaitGroup
	sem := make(chan struct{}, o.workers())
	for i, c := range res.schema.Columns {
		ref := res.refCols[i]
		var cur *colScan
		if res.curCols != nil {
			cur = res.curCols[i]
		}
		col := Column{Name: c.Name, Type: c.Type, Required: c.Required, Ignored: res.ignored[c.Name],
			Reference: side(ref, res.ref.rows)}
		if c.Type != Ignore {
			col.Weight = 1
			if w, ok := o.Weights[c.Name]; ok {
				col.Weight = w
			}
		}
		if cur != nil {
			s := side(cur, res.cur.rows)
			col.Current = &s
		}
		out[i] = col
		if c.Type == Ignore {
			continue
		}
		wg.Add(1)
		sem <- struct{}{}
		go func(i int, ref, cur *colScan) {
			defer wg.Done()
			defer func() { <-sem }()
			d := drift(ref, cur, o.Bins)
			out[i].Drift = &d
		}(i, ref, cur)
	}
	wg.Wait()
	// Benjamini-Hochberg across the features tested.
	var idx []int
	var ps []float64
	for i := range out {
		if d := out[i].Drift; d != nil && d.Tested {
			idx = append(idx, i)
			ps = append(ps, d.p)
		}
	}
	adj := stats.BenjaminiHochberg(ps)
	for k, i := range idx {
		d := out[i].Drift
		d.PAdjusted = num(adj[k])
		d.Drifted = adj[k] < o.Alpha && d.PSI != nil && *d.PSI >= o.PSIThreshold
	}
	return out
}

func side(c *colScan, rows int64) Side {
	s := Side{Rows: rows, Missing: c.missing, MissingShare: share(c.missing, rows),
		TypeErrors: c.typeErrors, OutOfRange: c.outOfRange, Unseen: c.unseen, Sampled: len(c.sample.vals)}
	if c.typ == Numeric && c.numbers > 0 {
		s.Min, s.Max = num(c.min), num(c.max)
	}
	for i, v := range sortedByCount(c.unseenTop) {
		if i == maxUnseenInReport {
			break
		}
		s.TopUnseen = append(s.TopUnseen, ValueCount{v, c.unseenTop[v]})
	}
	return s
}

// drift tests one feature: numeric by two-sample KS on the samples, with
// Wasserstein-1 and PSI on reference-quantile bins; categorical by the
// chi-square test of homogeneity on the category counts (unseen values in
// one bucket), with PSI and the Jensen-Shannon distance (base 2, so 0 to 1).
func drift(ref, cur *colScan, bins int) ColumnDrift {
	if cur == nil {
		return ColumnDrift{NotTested: "the current batch lacks the column"}
	}
	switch ref.typ {
	case Numeric:
		a, b := ref.sample.vals, cur.sample.vals
		if len(a) == 0 || len(b) == 0 {
			return ColumnDrift{NotTested: "no numbers in " + emptySide(len(a), len(b))}
		}
		ks := stats.KSTest(a, b) // sorts both
		d := ColumnDrift{Tested: true, Test: testKS, Statistic: num(ks.D), PValue: num(ks.PValue), Exact: ks.Exact, p: ks.PValue,
			Wasserstein: num(stats.Wasserstein1Sorted(a, b))}
		edges := quantileEdges(a, bins)
		ra, rb := binCounts(a, edges), binCounts(b, edges)
		d.PSI = num(stats.PSI(ra, rb))
		for i := range ra {
			bin := Bin{Reference: ra[i] / float64(len(a)), Current: rb[i] / float64(len(b))}
			if i < len(edges) {
				bin.UpTo = num(edges[i])
			} else if len(edges) > 0 {
				bin.Above = num(edges[len(edges)-1])
			}
			d.Bins = append(d.Bins, bin)
		}
		if math.IsNaN(d.p) {
			d.p = 1
		}
		return d
	case Categorical:
		cats := make([]string, len(ref.index))
		for v, i := range ref.index {
			cats[i] = v
		}
		ra := make([]float64, len(cats), len(cats)+1)
		rb := make([]float64, len(cats), len(cats)+1)
		var na, nb float64
		for i := range cats {
			ra[i], rb[i] = float64(ref.counts[i]), float64(cur.counts[i])
			na += ra[i]
			nb += rb[i]
		}
		if ref.unseen > 0 || cur.unseen > 0 {
			cats = append(cats, unseenBucket)
			ra = append(ra, float64(ref.unseen))
			rb = append(rb, float64(cur.unseen))
			na += float64(ref.unseen)
			nb += float64(cur.unseen)
		}
		if na == 0 || nb == 0 {
			return ColumnDrift{NotTested: "no values in " + emptySide(int(na), int(nb))}
		}
		chi, dof, p, _ := stats.ChiSquareHomogeneity([][]float64{ra, rb})
		d := ColumnDrift{Tested: true, Test: testChiSquare, Statistic: num(chi), DoF: dof, PValue: num(p), p: p,
			PSI: num(stats.PSI(ra, rb)), JensenShannon: num(stats.JensenShannonDistance(ra, rb, 2))}
		if math.IsNaN(d.p) {
			d.p = 1
		}
		for i, c := range cats {
			d.Bins = append(d.Bins, Bin{Category: c, Reference: ra[i] / na, Current: rb[i] / nb})
		}
		return d
	}
	return ColumnDrift{NotTested: "ignored"}
}

func emptySide(a, b int) string {
	switch {
	case a == 0 && b == 0:
		return "either batch"
	case a == 0:
		return "the reference"
	default:
		return "the current batch"
	}
}

// quantileEdges are the upper edges of bins holding about equal shares of
// the sorted reference sample: its values at the 1/bins, 2/bins, ...
// quantiles, without repeats (ties merge bins).
func quantileEdges(sorted []float64, bins int) []float64 {
	var edges []float64
	n := len(sorted)
	for k := 1; k < bins; k++ {
		i := int(math.Ceil(float64(k)*float64(n)/float64(bins))) - 1
		if i < 0 {
			i = 0
		}
		e := sorted[i]
		if e == sorted[n-1] {
			break // nothing would fall above it
		}
		if len(edges) == 0 || e > edges[len(edges)-1] {
			edges = append(edges, e)
		}
	}
	return edges
}

// binCounts counts a sorted sample into the bins the edges bound: bin i
// holds values in (edges[i-1], edges[i]], the last everything above.
func binCounts(sorted []float64, edges []float64) []float64 {
	out := make([]float64, len(edges)+1)
	prev := 0
	for i, e := range edges {
		k := sort.Search(len(sorted), func(j int) bool { return sorted[j] > e })
		out[i] = float64(k - prev)
		prev = k
	}
	out[len(edges)] = float64(len(sorted) - prev)
	return out
}

// quality lists the current batch's data-quality findings: the batch as a
// whole first, then column by column, then duplicates.
func quality(res *result, cols []Column) Quality {
	l := res.opts.Limits
	var fs []Finding
	add := func(f Finding) { fs = append(fs, f) }
	rows := res.cur.rows
	at := func(e example) string {
		if !e.set || res.curR == nil {
			return ""
		}
		return res.curR.At(e.pos)
	}
	atValue := func(e example) string {
		if !e.set || res.curR == nil {
			return ""
		}
		return fmt.Sprintf("%s (%s)", res.curR.At(e.pos), strconv.Quote(clip(e.value, 60)))
	}
	repeat := func(e example) string {
		if !e.set || res.curR == nil {
			return ""
		}
		return fmt.Sprintf("%s repeats %s", res.curR.At(e.pos), res.curR.At(e.first))
	}
	over := func(n int64, limit float64) bool { return rows > 0 && share(n, rows) > limit }
	if res.curR == nil {
		add(Finding{Check: CheckUnreadable, Message: fmt.Sprintf("the current batch cannot be read: %v", res.curErr)})
		return Quality{OK: false, Findings: fs}
	}
	if res.curErr != nil {
		add(Finding{Check: CheckUnreadable, Count: rows, Message: fmt.Sprintf("reading stopped after %d rows: %v; the rows before were checked", rows, res.curErr)})
	}
	switch {
	case rows == 0:
		add(Finding{Check: CheckEmpty, Message: "the current batch has no rows"})
	case rows < l.MinRows:
		add(Finding{Check: CheckTooFewRows, Count: rows, Message: fmt.Sprintf("%d rows, fewer than the %d asked (--min-rows)", rows, l.MinRows)})
	}
	if res.cur.truncated {
		add(Finding{Check: CheckTruncated, Count: 1, Example: res.cur.truncatedWhere,
			Message: "the last row is malformed: the batch looks cut off while it was written"})
	}
	malformed := res.cur.malformed
	if res.cur.truncated {
		malformed-- // counted as truncated
	}
	if total := rows + malformed; malformed > 0 && share(malformed, total) > l.MalformedRows {
		s, lim := share(malformed, total), l.MalformedRows
		add(Finding{Check: CheckMalformedRows, Count: malformed, Share: &s, Limit: &lim, Example: res.cur.firstMalformed,
			Message: fmt.Sprintf("%d malformed rows (%s), above the limit of %s (--max-malformed-rows)", malformed, pct(s), pct(lim))})
	}
	for i, c := range res.schema.Columns {
		if res.curCols[i] == nil {
			add(Finding{Check: CheckMissingColumn, Column: c.Name, Message: fmt.Sprintf("the current batch has no column %s, which the schema lists", c.Name)})
		}
	}
	if id := res.schema.ID; id != "" && res.curIDIdx < 0 {
		add(Finding{Check: CheckMissingColumn, Column: id, Message: fmt.Sprintf("the current batch has no id column %s", id)})
	}
	for i, c := range res.schema.Columns {
		cur := res.curCols[i]
		if cur == nil || rows == 0 {
			continue
		}
		ref := res.refCols[i]
		curShare, refShare := share(cur.missing, rows), share(ref.missing, res.ref.rows)
		switch {
		case c.Required && cur.missing > 0:
			lim := 0.0
			add(Finding{Check: CheckMissing, Column: c.Name, Count: cur.missing, Share: &curShare, Limit: &lim, Example: at(cur.firstMissing),
				Message: fmt.Sprintf("%d rows (%s) miss %s, a required column", cur.missing, pct(curShare), c.Name)})
		case !c.Required && curShare-refShare > l.MissingIncrease:
			lim := refShare + l.MissingIncrease
			add(Finding{Check: CheckMissing, Column: c.Name, Count: cur.missing, Share: &curShare, Limit: &lim, Example: at(cur.firstMissing),
				Message: fmt.Sprintf("%s of rows miss %s against %s in the reference; at most %s more is allowed (--max-missing-increase)", pct(curShare), c.Name, pct(refShare), pct(l.MissingIncrease))})
		}
		if c.Type == Numeric && over(cur.typeErrors, l.TypeErrors) {
			s, lim := share(cur.typeErrors, rows), l.TypeErrors
			add(Finding{Check: CheckTypeErrors, Column: c.Name, Count: cur.typeErrors, Share: &s, Limit: &lim, Example: atValue(cur.firstTypeError),
				Message: fmt.Sprintf("%d values of %s (%s) are not numbers, above the limit of %s (--max-type-errors)", cur.typeErrors, c.Name, pct(s), pct(lim))})
		}
		if c.Type == Numeric && over(cur.outOfRange, l.OutOfRange) {
			s, lim := share(cur.outOfRange, rows), l.OutOfRange
			add(Finding{Check: CheckOutOfRange, Column: c.Name, Count: cur.outOfRange, Share: &s, Limit: &lim, Example: atValue(cur.firstOutOfRange),
				Message: fmt.Sprintf("%d values of %s (%s) lie outside [%s, %s], above the limit of %s (--max-out-of-range)", cur.outOfRange, c.Name, pct(s), bound(c.Min), bound(c.Max), pct(lim))})
		}
		if c.Type == Categorical && res.closed[i] && over(cur.unseen, l.Unseen) {
			s, lim := share(cur.unseen, rows), l.Unseen
			var top []string
			for k, v := range sortedByCount(cur.unseenTop) {
				if k == maxUnseenInMessages {
					break
				}
				top = append(top, fmt.Sprintf("%q (%d)", v, cur.unseenTop[v]))
			}
			add(Finding{Check: CheckUnseen, Column: c.Name, Count: cur.unseen, Share: &s, Limit: &lim, Example: atValue(cur.firstUnseen),
				Message: fmt.Sprintf("%d values of %s (%s) are categories the reference never had, above the limit of %s (--max-unseen): %s", cur.unseen, c.Name, pct(s), pct(lim), strings.Join(top, ", "))})
		}
	}
	if d := res.dup; d != nil && over(d.dupRows, l.DuplicateRows) {
		s, lim := share(d.dupRows, rows), l.DuplicateRows
		add(Finding{Check: CheckDuplicateRows, Count: d.dupRows, Share: &s, Limit: &lim, Example: repeat(d.firstDup),
			Message: fmt.Sprintf("%d rows (%s) repeat an earlier row exactly, above the limit of %s (--max-duplicate-rows)", d.dupRows, pct(s), pct(lim))})
	}
	if d := res.dup; d != nil && d.id >= 0 && over(d.dupIDs, l.DuplicateIDs) {
		s, lim := share(d.dupIDs, rows), l.DuplicateIDs
		add(Finding{Check: CheckDuplicateIDs, Column: res.schema.ID, Count: d.dupIDs, Share: &s, Limit: &lim, Example: repeat(d.firstDupID),
			Message: fmt.Sprintf("%d rows (%s) repeat an earlier row's %s, above the limit of %s (--max-duplicate-ids)", d.dupIDs, pct(s), res.schema.ID, pct(lim))})
	}
	if fs == nil {
		fs = []Finding{}
	}
	return Quality{OK: len(fs) == 0, Findings: fs}
}

func bound(p *float64) string {
	if p == nil {
		return "-"
	}
	return strconv.FormatFloat(*p, 'g', 6, 64)
}

func pct(x float64) string {
	switch {
	case x == 0:
		return "0%"
	case x < 0.001:
		return strconv.FormatFloat(x*100, 'g', 2, 64) + "%"
	default:
		return strconv.FormatFloat(x*100, 'f', 1, 64) + "%"
	}
}

func clip(s string, n int) string {
	if len(s) <= n {
		return s
	}
	return s[:n] + "..."
}

// driftVerdict weighs the drifted features: the dataset has drifted when
// they carry at least the limit of the features' weight.
func driftVerdict(res *result, cols []Column) DriftVerdict {
	v := DriftVerdict{Limit: res.opts.DriftedWeightLimit, Drifted: []string{}}
	var total, drifted float64
	for _, c := range cols {
		if c.Drift == nil || !c.Drift.Tested {
			continue
		}
		v.Tested++
		total += c.Weight
		if c.Drift.Drifted {
			drifted += c.Weight
			v.Drifted = append(v.Drifted, c.Name)
		}
	}
	switch {
	case v.Tested == 0 && res.curR == nil:
		v.Why = "the current batch cannot be read"
	case v.Tested == 0:
		v.Why = "no feature could be tested"
	case total > 0:
		v.DriftedWeight = drifted / total
		v.Detected = v.DriftedWeight >= v.Limit
	}
	return v
}

// WriteJSON writes the full report.
func WriteJSON(w io.Writer, r *Report) error { return outfile.JSON(w, r) }

// Compact is the report for the controller: the answers, the findings, and
// the tested features, drifted first and then by PSI.
func Compact(r *Report) ([]byte, *checkreport.Report, error) {
	c := &checkreport.Report{Schema: checkreport.Schema, Rows: r.Current.Rows, ReferenceRows: r.Reference.Rows,
		DataQuality: checkreport.Quality{OK: r.DataQuality.OK},
		Drift:       checkreport.Drift{Detected: r.Drift.Detected, DriftedWeight: r.Drift.DriftedWeight, Limit: r.Drift.Limit}}
	for _, f := range r.DataQuality.Findings {
		c.DataQuality.Findings = append(c.DataQuality.Findings, checkreport.Finding{Check: f.Check, Column: f.Column, Count: f.Count,
			Share: f.Share, Limit: f.Limit, Example: clip(f.Example, 120)})
	}
	var tested []Column
	for _, col := range r.Columns {
		if col.Drift != nil && col.Drift.Tested {
			tested = append(tested, col)
		}
	}
	sort.SliceStable(tested, func(i, j int) bool {
		a, b := tested[i].Drift, tested[j].Drift
		if a.Drifted != b.Drifted {
			return a.Drifted
		}
		return psiOf(a) > psiOf(b)
	})
	for _, col := range tested {
		c.Drift.Features = append(c.Drift.Features, checkreport.Feature{Feature: col.Name, PSI: col.Drift.PSI, PAdjusted: col.Drift.PAdjusted, Drifted: col.Drift.Drifted})
	}
	b, err := checkreport.Encode(c)
	if err != nil {
		return nil, nil, err
	}
	parsed, err := checkreport.Parse(b)
	if err != nil {
		return nil, nil, fmt.Errorf("the compact report does not read back: %w", err)
	}
	return b, parsed, nil
}

func psiOf(d *ColumnDrift) float64 {
	if d.PSI == nil {
		return -1
	}
	return *d.PSI
}

func fmtNum(p *float64) string {
	if p == nil {
		return "-"
	}
	return strconv.FormatFloat(*p, 'g', 3, 64)
}

// WriteTable prints the report as a person reads it.
func WriteTable(w io.Writer, r *Report) error {
	fmt.Fprintf(w, "reference %s: %d rows; current %s: %d rows; columns %s\n\n", r.Reference.File, r.Reference.Rows, r.Current.File, r.Current.Rows, r.ColumnSchema)
	if r.DataQuality.OK {
		fmt.Fprintln(w, "data quality: ok")
	} else {
		fmt.Fprintf(w, "data quality: NOT OK, %d findings\n", len(r.DataQuality.Findings))
		tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
		fmt.Fprintln(tw, "  CHECK\tCOLUMN\tROWS\tEXAMPLE\tWHY")
		for _, f := range r.DataQuality.Findings {
			fmt.Fprintf(tw, "  %s\t%s\t%d\t%s\t%s\n", f.Check, orDash(f.Column), f.Count, orDash(f.Example), f.Message)
		}
		if err := tw.Flush(); err != nil {
			return err
		}
	}
	fmt.Fprintln(w)
	switch {
	case r.Drift.Why != "":
		fmt.Fprintf(w, "drift: not judged: %s\n", r.Drift.Why)
	default:
		word := "not enough to act on"
		if r.Drift.Detected {
			word = "THE INPUTS MOVED"
		}
		fmt.Fprintf(w, "drift: %s: %d of %d features drifted, carrying %.2f of the features' weight (limit %.2f)\n", word, len(r.Drift.Drifted), r.Drift.Tested, r.Drift.DriftedWeight, r.Drift.Limit)
	}
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "  FEATURE\tTYPE\tWEIGHT\tMISSING REF\tMISSING CUR\tTEST\tSTATISTIC\tP ADJ.\tPSI\tW1 / JS\tDRIFTED")
	for _, c := range r.Columns {
		if c.Type == Ignore {
			continue
		}
		cur := "-"
		if c.Current != nil {
			cur = pct(c.Current.MissingShare)
		}
		d := c.Drift
		if d == nil || !d.Tested {
			why := "not tested"
			if d != nil && d.NotTested != "" {
				why += ": " + d.NotTested
			}
			fmt.Fprintf(tw, "  %s\t%s\t%g\t%s\t%s\t%s\t\t\t\t\t\n", c.Name, c.Type, c.Weight, pct(c.Reference.MissingShare), cur, why)
			continue
		}
		dist := fmtNum(d.Wasserstein)
		if d.JensenShannon != nil {
			dist = fmtNum(d.JensenShannon)
		}
		drifted := "no"
		if d.Drifted {
			drifted = "YES"
		}
		fmt.Fprintf(tw, "  %s\t%s\t%g\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\n", c.Name, c.Type, c.Weight, pct(c.Reference.MissingShare), cur,
			d.Test, fmtNum(d.Statistic), fmtNum(d.PAdjusted), fmtNum(d.PSI), dist, drifted)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	fmt.Fprintf(w, "  drifted: adjusted p below %g (Benjamini-Hochberg) and PSI at least %g\n", r.Settings.Alpha, r.Settings.PSIThreshold)
	for _, n := range r.Notes {
		fmt.Fprintf(w, "note: %s\n", n)
	}
	return nil
}

func orDash(s string) string {
	if s == "" {
		return "-"
	}
	return s
}
