// Package datacheck compares a current batch of data with a reference batch
// (the data the live model learned from): is the current batch sound enough
// to train on (missing values, type errors, out-of-range values, unseen
// categories, duplicates, an empty or cut-off batch), and have its inputs
// drifted (per feature, with a correction for testing many features, and a
// dataset-level verdict). It is the engine of plumbline datacheck, which a
// ModelLine's check Job runs.
package datacheck

import (
	"errors"
	"fmt"
	"io/fs"
	"runtime"
	"sort"

	"plumbline.dev/plumbline/internal/tools/table"
)

// InputError is input that cannot be checked at all: a missing or
// unreadable reference, a schema that does not fit it. A broken current
// batch is not an input error: it is what the check is for, and it is
// reported as a finding.
type InputError struct{ Err error }

func (e *InputError) Error() string { return e.Err.Error() }
func (e *InputError) Unwrap() error { return e.Err }

func inputErr(format string, args ...any) error {
	return &InputError{Err: fmt.Errorf(format, args...)}
}

// Limits are the data-quality thresholds, each a share of the current
// batch's rows: a finding is raised when a share is above its limit. They
// are defaults of ours, not published values: set them to your data.
type Limits struct {
	// MissingIncrease: a column's missing share may exceed the
	// reference's by this much. A required column may miss nothing.
	MissingIncrease float64 `json:"missingIncrease"`
	TypeErrors      float64 `json:"typeErrors"`
	OutOfRange      float64 `json:"outOfRange"`
	Unseen          float64 `json:"unseenCategories"`
	DuplicateRows   float64 `json:"duplicateRows"`
	DuplicateIDs    float64 `json:"duplicateIds"`
	MalformedRows   float64 `json:"malformedRows"`
	// MinRows: fewer rows in the current batch is a finding.
	MinRows int64 `json:"minRows"`
}

// DefaultLimits are the limits when none are given.
func DefaultLimits() Limits {
	return Limits{MissingIncrease: 0.05, TypeErrors: 0.001, OutOfRange: 0.001, Unseen: 0.01,
		DuplicateRows: 0.01, DuplicateIDs: 0, MalformedRows: 0.001, MinRows: 1}
}

// Options say what to check and how.
type Options struct {
	Reference, Current string
	// Format of both files; empty: from each file's extension.
	Format string
	// Schema of the columns; nil: inferred from the reference.
	Schema     *Schema
	SchemaFile string
	// ID names the id column (overrides the schema's).
	ID     string
	Limits Limits
	// Alpha is the level of the drift tests after the Benjamini-Hochberg
	// correction.
	Alpha float64
	// PSIThreshold is the effect a feature's drift must reach as well:
	// with many rows a test finds differences too small to matter.
	PSIThreshold float64
	// DriftedWeightLimit is the part of the features' weight the drifted
	// features must carry for the dataset to have drifted.
	DriftedWeightLimit float64
	// Weights weigh the features (default 1 each).
	Weights map[string]float64
	// SampleSize bounds the values kept per numeric column and batch for
	// KS, Wasserstein-1 and PSI.
	SampleSize int
	// Bins is the number of reference-quantile bins of the numeric PSI.
	Bins int
	Seed uint64
	// Workers read columns in parallel; 0: one per CPU.
	Workers int
}

// DefaultOptions are the settings of plumbline datacheck without flags.
func DefaultOptions() Options {
	return Options{Limits: DefaultLimits(), Alpha: 0.05, PSIThreshold: 0.1, DriftedWeightLimit: 0.25,
		SampleSize: 100_000, Bins: 10, Seed: 1}
}

// result is everything the two passes found, for the report.
type result struct {
	opts     Options
	schema   *Schema
	inferred bool
	ignored  map[string]string // column → why it was ignored (inferred)
	ref, cur scanned
	refR     table.Reader
	curR     table.Reader // nil when the current batch could not be opened
	curErr   error        // why it could not be opened or read through
	refCols  []*colScan   // one per schema column
	// closed marks the categorical columns whose categories the given
	// schema lists: a value outside them is a quality finding. Other
	// categories come from the reference and stay open: a new value (a new
	// depot) is drift, not broken data.
	closed   []bool
	curCols  []*colScan // nil entries: the column is missing
	dup      *dupScan
	curIDIdx int
}

func (o *Options) workers() int {
	if o.Workers > 0 {
		return o.Workers
	}
	return runtime.GOMAXPROCS(0)
}

// Run checks the current batch against the reference.
func Run(o Options) (*Report, error) {
	res, err := run(o)
	if err != nil {
		return nil, err
	}
	return build(res)
}

func run(o Options) (*result, error) {
	res, err := readReference(o)
	if err != nil {
		return nil, err
	}
	if err := res.scanCurrent(res.schema.ID); err != nil {
		return nil, err
	}
	return res, nil
}

// readReference reads the reference batch and settles the schema.
func readReference(o Options) (*result, error) {
	res := &result{opts: o, ignored: map[string]string{}, curIDIdx: -1}
	if o.Schema != nil {
		// A copy: the reference fills in categories the schema leaves out.
		s := *o.Schema
		s.Columns = append([]ColumnSchema(nil), o.Schema.Columns...)
		res.schema = &s
		for _, c := range s.Columns {
			res.closed = append(res.closed, c.Type == Categorical && c.Closed)
		}
	}
	format, err := table.FormatOf(o.Reference, o.Format)
	if err != nil {
		return nil, inputErr("--reference: %w", err)
	}
	ref, err := table.Open(o.Reference, format)
	if err != nil {
		return nil, inputErr("--reference: %w", err)
	}
	defer ref.Close()
	res.refR = ref
	id := o.ID
	if id == "" && o.Schema != nil {
		id = o.Schema.ID
	}
	if err := res.scanReference(ref, id); err != nil {
		return nil, err
	}
	res.schema.ID = id
	return res, nil
}

func cellIndex(cols []string) map[string]int {
	m := make(map[string]int, len(cols))
	for i, c := range cols {
		m[c] = i
	}
	return m
}

func colCost(t task) int {
	if c, ok := t.(*colScan); ok && c.typ == Ignore {
		return 1
	}
	return 4 // a number to parse or a category to look up
}

// scanReference reads the reference: with a schema, the columns it lists
// (each must be there); without, every column, inferring its type.
func (res *result) scanReference(ref table.Reader, id string) error {
	o := res.opts
	at := cellIndex(ref.Columns())
	if id != "" {
		if _, ok := at[id]; !ok {
			return inputErr("--reference %s: no id column %q (--id or the schema's id); the columns are %v", o.Reference, id, ref.Columns())
		}
	}
	var cols []*colScan
	if res.schema != nil {
		for _, c := range res.schema.Columns {
			i, ok := at[c.Name]
			if !ok {
				return inputErr("--reference %s: no column %q, which the schema lists; the columns are %v", o.Reference, c.Name, ref.Columns())
			}
			cols = append(cols, newColScan(c, i, o, 0, len(cols)))
		}
	} else {
		res.inferred = true
		for i, name := range ref.Columns() {
			if name == id {
				continue
			}
			cs := &colScan{name: name, idx: i, seen: map[string]int64{}, sample: newReservoir(o.SampleSize, o.Seed, uint64(2*len(cols)))}
			cols = append(cols, cs)
		}
	}
	tasks := make([]task, len(cols))
	for i, c := range cols {
		tasks[i] = c
	}
	sc, err := scan(ref, plan(tasks, colCost, o.workers()))
	if err != nil {
		return inputErr("--reference: %w", err)
	}
	if sc.rows == 0 {
		return inputErr("--reference %s: no rows; the reference is the batch the live model learned from, and the current batch is judged against it", o.Reference)
	}
	res.ref = sc
	res.refCols = cols
	if res.inferred {
		res.schema = &Schema{ID: id}
		for _, c := range cols {
			res.schema.Columns = append(res.schema.Columns, res.decide(c))
			res.closed = append(res.closed, false)
		}
		return nil
	}
	for _, c := range cols {
		if c.typ == Categorical && c.index == nil {
			if c.overflow {
				return inputErr("--schema: column %q has more than %d distinct values in the reference; list its categories in the schema, or make it ignore", c.name, MaxCategories)
			}
			sc := res.schema.column(c.name)
			sc.Categories = sortedKeys(c.seen)
			c.fromSeen(sc.Categories)
		}
	}
	return nil
}

// newColScan prepares a column's scan from its schema.
func newColScan(c ColumnSchema, idx int, o Options, side uint64, n int) *colScan {
	cs := &colScan{name: c.Name, idx: idx, typ: c.Type, lo: c.Min, hi: c.Max,
		sample: newReservoir(o.SampleSize, o.Seed, uint64(2*n)+side)}
	if c.Type == Categorical {
		if len(c.Categories) == 0 {
			cs.seen = map[string]int64{}
		} else {
			cs.setCategories(c.Categories)
		}
	}
	return cs
}

func (c *colScan) setCategories(cats []string) {
	c.index = make(map[string]int, len(cats))
	for i, v := range cats {
		c.index[v] = i
	}
	c.counts = make([]int64, len(cats))
	c.unseenTop = map[string]int64{}
}

// fromSeen turns the values counted while inferring into category counts.
func (c *colScan) fromSeen(cats []string) {
	seen := c.seen
	c.setCategories(cats)
	for i, v := range cats {
		c.counts[i] = seen[v]
	}
	c.seen = nil
}

// decide fixes an inferred column's type and what the schema says of it.
func (res *result) decide(c *colScan) ColumnSchema {
	typ, why := inferType(c.rows-c.missing, c.numbers, len(c.seen), c.overflow)
	cs := ColumnSchema{Name: c.name, Type: typ}
	c.typ = typ
	switch typ {
	case Numeric:
		lo, hi := widen(c.min, c.max)
		cs.Min, cs.Max = &lo, &hi
		c.seen = nil
	case Categorical:
		cs.Categories = sortedKeys(c.seen)
		c.fromSeen(cs.Categories)
		c.sample.vals = nil
		// Values that read as numbers were counted as categories too.
		c.typeErrors = 0
	default:
		res.ignored[c.name] = why
		c.seen, c.sample.vals = nil, nil
		c.typeErrors = 0
	}
	return cs
}

// scanCurrent reads the current batch against the decided schema. A batch
// that cannot be opened or read through is a finding, not an error: only
// a missing file is an input error.
func (res *result) scanCurrent(id string) error {
	o := res.opts
	format, err := table.FormatOf(o.Current, o.Format)
	if err != nil {
		return inputErr("--current: %w", err)
	}
	cur, err := table.Open(o.Current, format)
	if errors.Is(err, fs.ErrNotExist) || errors.Is(err, fs.ErrPermission) {
		return inputErr("--current: %w", err)
	}
	if err != nil {
		res.curErr = err
		return nil
	}
	res.curR = cur
	defer cur.Close()
	at := cellIndex(cur.Columns())
	var tasks []task
	res.curCols = make([]*colScan, len(res.schema.Columns))
	for n, c := range res.schema.Columns {
		i, ok := at[c.Name]
		if !ok {
			continue
		}
		cs := newColScan(c, i, o, 1, n)
		res.curCols[n] = cs
		tasks = append(tasks, cs)
	}
	if i, ok := at[id]; ok && id != "" {
		res.curIDIdx = i
	}
	res.dup = newDupScan(res.curIDIdx)
	tasks = append(tasks, res.dup)
	sc, err := scan(cur, plan(tasks, func(t task) int {
		if _, ok := t.(*dupScan); ok {
			return 8
		}
		return colCost(t)
	}, o.workers()))
	res.cur = sc
	if err != nil {
		res.curErr = err
	}
	return nil
}

// sortedByCount lists values by count, largest first, then by name.
func sortedByCount(m map[string]int64) []string {
	keys := sortedKeys(m)
	sort.SliceStable(keys, func(i, j int) bool { return m[keys[i]] > m[keys[j]] })
	return keys
}
