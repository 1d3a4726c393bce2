// Package evaluate measures a candidate model against the live one on a
// golden set: metrics overall and per segment, paired tests that tell a real
// difference from noise, must-pass rows, a full JSON report and the compact
// gate report the controller judges.
package evaluate

import (
	"errors"
	"fmt"
	"io"
	"strings"

	"plumbline.dev/plumbline/internal/tools/table"
)

// Tasks.
const (
	Binary     = "binary"
	Multiclass = "multiclass"
	Regression = "regression"
)

// InputError is bad input: it names the file, the row and the column.
type InputError struct{ Err error }

func (e *InputError) Error() string { return e.Err.Error() }
func (e *InputError) Unwrap() error { return e.Err }

func inputErr(format string, args ...any) error {
	return &InputError{Err: fmt.Errorf(format, args...)}
}

// Columns names the columns to read.
type Columns struct {
	Label, Candidate, Baseline string
	ID, Segment, MustPass      string
}

// Dataset is a golden set in memory, one entry per row in each slice.
type Dataset struct {
	Task string
	N    int
	// Binary: label 0/1; candidate and baseline scores (a class prediction
	// reads as a score of 0 or 1).
	Label      []uint8
	Cand, Base []float64
	// Probabilities says every score lies in [0, 1], so log loss and the
	// Brier score mean something.
	CandProb, BaseProb bool
	// Multiclass: class indexes into Classes.
	LabelClass, CandClass, BaseClass []int32
	Classes                          []string
	// Regression: values.
	Y []float64
	// Segment indexes into Segments; nil without a segment column.
	Segment  []int32
	Segments []string
	// MustPass lists the must-pass rows, with their ids (or "row N").
	MustPass   []int32
	MustPassID []string
}

// binaryCoding reads a binary label or class prediction: 1/0, true/false,
// yes/no, or the named positive class against any one other value.
type binaryCoding struct {
	positive string
	negative string // the other class, once seen (with a named positive)
}

func (b *binaryCoding) read(c table.Cell) (uint8, bool) {
	s := strings.TrimSpace(c.S)
	if b.positive != "" {
		if s == b.positive {
			return 1, true
		}
		if c.IsNull() {
			return 0, false
		}
		if b.negative == "" {
			b.negative = s
		}
		return 0, s == b.negative
	}
	if f, ok := c.Float(); ok && (f == 0 || f == 1) {
		return uint8(f), true
	}
	switch strings.ToLower(s) {
	case "true", "yes":
		return 1, true
	case "false", "no":
		return 0, true
	}
	return 0, false
}

func (b *binaryCoding) want() string {
	if b.positive != "" {
		if b.negative != "" {
			return fmt.Sprintf("the positive class %q or the other class %q", b.positive, b.negative)
		}
		return fmt.Sprintf("the positive class %q or one other class", b.positive)
	}
	return "1 or 0 (or true/false, yes/no; name the positive class with --positive for other labels)"
}

func truthy(c table.Cell) bool {
	if f, ok := c.Float(); ok {
		return f != 0
	}
	switch strings.ToLower(strings.TrimSpace(c.S)) {
	case "true", "yes", "y":
		return true
	}
	return false
}

// Load reads a golden set, streaming: only the columns named are kept.
func Load(path, format, task string, cols Columns, positive string) (*Dataset, error) {
	f, err := table.FormatOf(path, format)
	if err != nil {
		return nil, inputErr("%v", err)
	}
	r, err := table.Open(path, f)
	if err != nil {
		return nil, inputErr("%v", err)
	}
	defer r.Close()
	idx := func(name, flag string, required bool) (int, error) {
		if name == "" {
			if required {
				return -1, inputErr("%s is required", flag)
			}
			return -1, nil
		}
		i, err := table.Index(r, name, flag, path)
		if err != nil {
			return -1, &InputError{Err: err}
		}
		return i, nil
	}
	li, err := idx(cols.Label, "--label", true)
	if err != nil {
		return nil, err
	}
	ci, err := idx(cols.Candidate, "--candidate", true)
	if err != nil {
		return nil, err
	}
	bi, err := idx(cols.Baseline, "--baseline", true)
	if err != nil {
		return nil, err
	}
	ii, err := idx(cols.ID, "--id", false)
	if err != nil {
		return nil, err
	}
	si, err := idx(cols.Segment, "--segment", false)
	if err != nil {
		return nil, err
	}
	mi, err := idx(cols.MustPass, "--must-pass", false)
	if err != nil {
		return nil, err
	}
	if mi >= 0 && task == Regression {
		return nil, inputErr("--must-pass: must-pass rows need a classification task (binary or multiclass): a regression value is never simply right")
	}

	ds := &Dataset{Task: task}
	ds.CandProb, ds.BaseProb = true, true
	coding := &binaryCoding{positive: positive}
	classIdx := map[string]int32{}
	class := func(c table.Cell) int32 {
		s := strings.TrimSpace(c.S)
		k, ok := classIdx[s]
		if !ok {
			k = int32(len(ds.Classes))
			classIdx[s] = k
			ds.Classes = append(ds.Classes, s)
		}
		return k
	}
	segIdx := map[string]int32{}
	for {
		cells, err := r.Next()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return nil, &InputError{Err: err}
		}
		bad := func(col int, flag, want string) error {
			return inputErr("%s: column %q (%s): want %s, got %q", r.Where(), r.Columns()[col], flag, want, cells[col].S)
		}
		switch task {
		case Binary:
			l, ok := coding.read(cells[li])
			if !ok {
				return nil, bad(li, "--label", coding.want())
			}
			ds.Label = append(ds.Label, l)
			for _, m := range []struct {
				col  int
				flag string
				dst  *[]float64
				prob *bool
			}{{ci, "--candidate", &ds.Cand, &ds.CandProb}, {bi, "--baseline", &ds.Base, &ds.BaseProb}} {
				v, ok := cells[m.col].Float()
				if !ok {
					b, isClass := coding.read(cells[m.col])
					if !isClass {
						return nil, bad(m.col, m.flag, "a score (a number) or a class like the label's")
					}
					v = float64(b)
				}
				if v < 0 || v > 1 {
					*m.prob = false
				}
				*m.dst = append(*m.dst, v)
			}
		case Multiclass:
			for _, m := range []struct {
				col  int
				flag string
			}{{li, "--label"}, {ci, "--candidate"}, {bi, "--baseline"}} {
				if cells[m.col].IsNull() {
					return nil, bad(m.col, m.flag, "a class name")
				}
			}
			ds.LabelClass = append(ds.LabelClass, class(cells[li]))
			ds.CandClass = append(ds.CandClass, class(cells[ci]))
			ds.BaseClass = append(ds.BaseClass, class(cells[bi]))
		case Regression:
			for _, m := range []struct {
				col  int
				flag string
				dst  *[]float64
			}{{li, "--label", &ds.Y}, {ci, "--candidate", &ds.Cand}, {bi, "--baseline", &ds.Base}} {
				v, ok := cells[m.col].Float()
				if !ok {
					return nil, bad(m.col, m.flag, "a number")
				}
				*m.dst = append(*m.dst, v)
			}
		default:
			return nil, inputErr("--task %q: want binary, multiclass or regression", task)
		}
		if si >= 0 {
			name := strings.TrimSpace(cells[si].S)
			if cells[si].IsNull() {
				name = "(missing)"
			}
			k, ok := segIdx[name]
			if !ok {
				k = int32(len(ds.Segments))
				segIdx[name] = k
				ds.Segments = append(ds.Segments, name)
			}
			ds.Segment = append(ds.Segment, k)
		}
		if mi >= 0 && truthy(cells[mi]) {
			id := fmt.Sprintf("row %d", ds.N+1)
			if ii >= 0 && !cells[ii].IsNull() {
				id = cells[ii].S
			}
			ds.MustPass = append(ds.MustPass, int32(ds.N))
			ds.MustPassID = append(ds.MustPassID, id)
		}
		ds.N++
	}
	if ds.N == 0 {
		return nil, inputErr("%s: no rows", path)
	}
	return ds, nil
}
