// Package table reads tabular files row by row, whatever their format (CSV
// with a header, JSON Lines, Parquet), so the evaluator and the data checks
// stream their input instead of loading it. Every error names the file, the
// row's line and what was wrong.
package table

import (
	"bufio"
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"strings"

	"github.com/parquet-go/parquet-go"
)

// Format is a file format.
type Format string

const (
	CSV     Format = "csv"
	JSONL   Format = "jsonl"
	Parquet Format = "parquet"
)

// FormatOf names the format of a file from its extension, unless one is
// given.
func FormatOf(path, given string) (Format, error) {
	switch strings.ToLower(given) {
	case "csv":
		return CSV, nil
	case "jsonl", "ndjson", "json":
		return JSONL, nil
	case "parquet":
		return Parquet, nil
	case "":
	default:
		return "", fmt.Errorf("format %q: want csv, jsonl or parquet", given)
	}
	switch ext := strings.ToLower(filepath.Ext(path)); ext {
	case ".csv":
		return CSV, nil
	case ".jsonl", ".ndjson", ".json":
		return JSONL, nil
	case ".parquet", ".pq":
		return Parquet, nil
	default:
		return "", fmt.Errorf("%s: cannot tell the format from the extension %q: name it (csv, jsonl or parquet)", path, ext)
	}
}

// Kind is what a cell holds.
type Kind uint8

const (
	Null Kind = iota
	Number
	Text
	Bool
)

// Cell is one value of a row.
type Cell struct {
	Kind Kind
	// S is the text as written (CSV, JSON strings), or the value rendered.
	S string
	// F is the value of a Number (and of a Bool: 0 or 1).
	F float64
}

// Float reads the cell as a number: a Number, a Bool, or text that parses
// as one.
func (c Cell) Float() (float64, bool) {
	switch c.Kind {
	case Number, Bool:
		return c.F, true
	case Text:
		f, err := strconv.ParseFloat(Trim(c.S), 64)
		if err != nil || math.IsInf(f, 0) || math.IsNaN(f) {
			return 0, false
		}
		return f, true
	}
	return 0, false
}

// IsNull reports whether the cell is empty: null, or empty text.
func (c Cell) IsNull() bool { return c.Kind == Null || c.Kind == Text && Trim(c.S) == "" }

// Trim is strings.TrimSpace with a fast path for the usual field that
// neither starts nor ends with a space.
func Trim(s string) string {
	if len(s) > 0 && s[0] > ' ' && s[0] < 0x80 && s[len(s)-1] > ' ' && s[len(s)-1] < 0x80 {
		return s
	}
	return strings.TrimSpace(s)
}

// Reader reads rows.
type Reader interface {
	// Columns names the columns, in the order of the cells of a row.
	Columns() []string
	// Next returns the next row; io.EOF at the end. The slice is reused.
	Next() ([]Cell, error)
	// Where names the last row read for a message: "golden.csv:17".
	Where() string
	// Pos is the last row's line (CSV, JSON Lines) or row number (Parquet),
	// for At.
	Pos() int64
	// At names a row by its Pos, as Where names the last one.
	At(pos int64) string
	Close() error
}

// RowError is one malformed row. The reader can go on past it: the next
// call to Next reads the row after (or io.EOF: a malformed last row is the
// mark of a batch cut off while it was written).
type RowError struct {
	Where string
	Pos   int64
	Msg   string
}

func (e *RowError) Error() string { return e.Where + ": " + e.Msg }

// Open opens a file for reading.
func Open(path string, format Format) (Reader, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	var r Reader
	switch format {
	case CSV:
		r, err = newFastCSV(f, path)
	case JSONL:
		r, err = newJSONL(f, path)
	case Parquet:
		r, err = newParquet(f, path)
	default:
		err = fmt.Errorf("unknown format %q", format)
	}
	if err != nil {
		f.Close()
		return nil, err
	}
	return r, nil
}

// jsonlReader reads one JSON object per line. The columns are the keys of
// the first object; later objects may leave some out (null) but not add
// new ones.
type jsonlReader struct {
	f     *os.File
	name  string
	sc    *bufio.Scanner
	cols  []string
	index map[string]int
	cells []Cell
	line  int
	first map[string]json.RawMessage
}

func newJSONL(f *os.File, name string) (*jsonlReader, error) {
	sc := bufio.NewScanner(f)
	sc.Buffer(make([]byte, 1<<20), 64<<20)
	j := &jsonlReader{f: f, name: name, sc: sc}
	obj, err := j.object()
	if errors.Is(err, io.EOF) {
		return nil, fmt.Errorf("%s: the file has no rows", name)
	}
	if err != nil {
		return nil, err
	}
	for k := range obj {
		j.cols = append(j.cols, k)
	}
	sort.Strings(j.cols)
	if err := checkColumns(name, j.cols); err != nil {
		return nil, err
	}
	j.index = map[string]int{}
	for i, c := range j.cols {
		j.index[c] = i
	}
	j.cells = make([]Cell, len(j.cols))
	j.first = obj
	return j, nil
}

// object reads the next non-blank line as a JSON object.
func (j *jsonlReader) object() (map[string]json.RawMessage, error) {
	for j.sc.Scan() {
		j.line++
		b := j.sc.Bytes()
		if j.line == 1 {
			b = bytes.TrimPrefix(b, []byte("\ufeff")) // a byte-order mark
		}
		b = bytes.TrimSpace(b)
		if len(b) == 0 {
			continue
		}
		var obj map[string]json.RawMessage
		if err := json.Unmarshal(b, &obj); err != nil {
			return nil, &RowError{Where: j.Where(), Pos: int64(j.line), Msg: fmt.Sprintf("not a JSON object: %v", err)}
		}
		return obj, nil
	}
	if err := j.sc.Err(); err != nil {
		return nil, fmt.Errorf("%s: %w", j.name, err)
	}
	return nil, io.EOF
}

func (j *jsonlReader) Columns() []string { return j.cols }

func (j *jsonlReader) Next() ([]Cell, error) {
	obj := j.first
	j.first = nil
	if obj == nil {
		var err error
		if obj, err = j.object(); err != nil {
			return nil, err
		}
	}
	for i := range j.cells {
		j.cells[i] = Cell{}
	}
	for k, raw := range obj {
		i, ok := j.index[k]
		if !ok {
			return nil, &RowError{Where: j.Where(), Pos: int64(j.line), Msg: fmt.Sprintf("key %q is not among the columns of the first row (%s)", k, strings.Join(j.cols, ", "))}
		}
		c, err := jsonCell(raw)
		if err != nil {
			return nil, &RowError{Where: j.Where(), Pos: int64(j.line), Msg: fmt.Sprintf("key %q: %v", k, err)}
		}
		j.cells[i] = c
	}
	return j.cells, nil
}

func jsonCell(raw json.RawMessage) (Cell, error) {
	raw = bytes.TrimSpace(raw)
	switch {
	case len(raw) == 0 || string(raw) == "null":
		return Cell{Kind: Null}, nil
	case raw[0] == '"':
		var s string
		if err := json.Unmarshal(raw, &s); err != nil {
			return Cell{}, err
		}
		return Cell{Kind: Text, S: s}, nil
	case string(raw) == "true":
		return Cell{Kind: Bool, S: "true", F: 1}, nil
	case string(raw) == "false":
		return Cell{Kind: Bool, S: "false", F: 0}, nil
	case raw[0] == '{' || raw[0] == '[':
		return Cell{}, fmt.Errorf("want a number, text, true, false or null, got %.40s", raw)
	}
	f, err := strconv.ParseFloat(string(raw), 64)
	if err != nil {
		return Cell{}, fmt.Errorf("not a number: %.40s", raw)
	}
	return Cell{Kind: Number, S: string(raw), F: f}, nil
}

func (j *jsonlReader) Where() string       { return j.At(int64(j.line)) }
func (j *jsonlReader) Pos() int64          { return int64(j.line) }
func (j *jsonlReader) At(pos int64) string { return fmt.Sprintf("%s:%d", j.name, pos) }
func (j *jsonlReader) Close() error        { return j.f.Close() }

// parquetReader reads a flat Parquet file (no nested columns).
type parquetReader struct {
	f     *os.File
	name  string
	r     *parquet.Reader
	cols  []string
	cells []Cell
	buf   []parquet.Row
	n, i  int
	row   int64
}

func newParquet(f *os.File, name string) (r *parquetReader, err error) {
	defer func() {
		// The Parquet library panics on some malformed files; a bad file
		// is an error, not a crash.
		if p := recover(); p != nil {
			r, err = nil, fmt.Errorf("%s: not a readable Parquet file: %v", name, p)
		}
	}()
	st, err := f.Stat()
	if err != nil {
		return nil, err
	}
	pf, err := parquet.OpenFile(f, st.Size())
	if err != nil {
		return nil, fmt.Errorf("%s: not a readable Parquet file: %w", name, err)
	}
	p := &parquetReader{f: f, name: name}
	for _, path := range pf.Schema().Columns() {
		if len(path) != 1 {
			return nil, fmt.Errorf("%s: column %s is nested; only flat files are read", name, strings.Join(path, "."))
		}
		p.cols = append(p.cols, path[0])
	}
	if err := checkColumns(name, p.cols); err != nil {
		return nil, err
	}
	p.r = parquet.NewReader(pf)
	p.cells = make([]Cell, len(p.cols))
	p.buf = make([]parquet.Row, 256)
	return p, nil
}

func (p *parquetReader) Columns() []string { return p.cols }

func (p *parquetReader) Next() (cells []Cell, err error) {
	defer func() {
		if r := recover(); r != nil {
			cells, err = nil, fmt.Errorf("%s: unreadable row: %v", p.Where(), r)
		}
	}()
	if p.i >= p.n {
		n, err := p.r.ReadRows(p.buf)
		if n == 0 {
			if err == nil || errors.Is(err, io.EOF) {
				return nil, io.EOF
			}
			return nil, fmt.Errorf("%s: %w", p.Where(), err)
		}
		p.n, p.i = n, 0
	}
	row := p.buf[p.i]
	p.i++
	p.row++
	for i := range p.cells {
		p.cells[i] = Cell{}
	}
	for _, v := range row {
		col := v.Column()
		if col < 0 || col >= len(p.cells) || v.IsNull() {
			continue
		}
		p.cells[col] = parquetCell(v)
	}
	return p.cells, nil
}

func parquetCell(v parquet.Value) Cell {
	switch v.Kind() {
	case parquet.Boolean:
		if v.Boolean() {
			return Cell{Kind: Bool, S: "true", F: 1}
		}
		return Cell{Kind: Bool, S: "false", F: 0}
	case parquet.Int32:
		return Cell{Kind: Number, S: strconv.FormatInt(int64(v.Int32()), 10), F: float64(v.Int32())}
	case parquet.Int64:
		return Cell{Kind: Number, S: strconv.FormatInt(v.Int64(), 10), F: float64(v.Int64())}
	case parquet.Float:
		return Cell{Kind: Number, S: strconv.FormatFloat(float64(v.Float()), 'g', -1, 32), F: float64(v.Float())}
	case parquet.Double:
		return Cell{Kind: Number, S: strconv.FormatFloat(v.Double(), 'g', -1, 64), F: v.Double()}
	case parquet.ByteArray, parquet.FixedLenByteArray:
		return Cell{Kind: Text, S: string(v.ByteArray())}
	}
	return Cell{Kind: Text, S: v.String()}
}

func (p *parquetReader) Where() string       { return p.At(p.row) }
func (p *parquetReader) Pos() int64          { return p.row }
func (p *parquetReader) At(pos int64) string { return fmt.Sprintf("%s: row %d", p.name, pos) }
func (p *parquetReader) Close() error        { return p.f.Close() }

func checkColumns(name string, cols []string) error {
	seen := map[string]bool{}
	for _, c := range cols {
		if c == "" {
			return fmt.Errorf("%s: a column has no name", name)
		}
		if seen[c] {
			return fmt.Errorf("%s: column %q appears twice", name, c)
		}
		seen[c] = true
	}
	return nil
}

// Index finds a column by name, with a message naming the columns there
// are when it is missing.
func Index(r Reader, name, flag, file string) (int, error) {
	for i, c := range r.Columns() {
		if c == name {
			return i, nil
		}
	}
	return -1, fmt.Errorf("%s: no column %q (%s); the columns are: %s", file, name, flag, strings.Join(r.Columns(), ", "))
}
