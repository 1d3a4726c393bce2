package table

import (
	"bufio"
	"bytes"
	"errors"
	"fmt"
	"io"
	"os"
	"strings"
)

// fastCSV reads RFC 4180 CSV (quoted fields, doubled quotes, line breaks
// inside quotes) without a string per field: each row's text is one string
// and its cells are slices of it. It is several times faster than
// encoding/csv on wide numeric files.
type fastCSV struct {
	f      *os.File
	name   string
	r      *bufio.Reader
	cols   []string
	cells  []Cell
	line   int // line where the current row starts
	next   int // line the next row starts on
	buf    []byte
	ends   []int
	fields []string // reused: Next copies the fields into cells at once
}

func newFastCSV(f *os.File, name string) (*fastCSV, error) {
	c := &fastCSV{f: f, name: name, r: bufio.NewReaderSize(f, 1<<20), next: 1}
	// A byte-order mark goes before the header is parsed, so a quoted first
	// column name reads as quoted.
	if bom, err := c.r.Peek(3); err == nil && string(bom) == "\ufeff" {
		if _, err := c.r.Discard(3); err != nil {
			return nil, fmt.Errorf("%s: %w", name, err)
		}
	}
	var head []string
	var err error
	for head == nil && err == nil {
		head, err = c.record()
	}
	if errors.Is(err, io.EOF) {
		return nil, fmt.Errorf("%s: the file is empty; want a header line naming the columns", name)
	}
	if err != nil {
		return nil, err
	}
	c.cols = make([]string, len(head))
	for i, h := range head {
		c.cols[i] = strings.TrimSpace(h)
	}
	if err := checkColumns(name, c.cols); err != nil {
		return nil, err
	}
	c.cells = make([]Cell, len(c.cols))
	return c, nil
}

// record reads one row's fields.
func (c *fastCSV) record() ([]string, error) {
	c.line = c.next
	c.buf = c.buf[:0]
	c.ends = c.ends[:0]
	line, err := c.readLine()
	if err != nil {
		return nil, err
	}
	if len(line) == 0 {
		return nil, nil // a blank line
	}
	if bytes.IndexByte(line, '"') < 0 {
		// The common case: no quotes, split on commas.
		s := string(line)
		fields := c.fields[:0]
		start := 0
		for i := 0; i < len(s); i++ {
			if s[i] == ',' {
				fields = append(fields, s[start:i])
				start = i + 1
			}
		}
		c.fields = append(fields, s[start:])
		return c.fields, nil
	}
	// Quotes: a small state machine, reading more lines while a quoted
	// field is open.
	var fields []int // end offsets into c.buf
	out := c.buf[:0]
	inQuote, fieldStart, quotedField := false, true, false
	for {
		for i := 0; i < len(line); i++ {
			b := line[i]
			switch {
			case inQuote && b == '"':
				if i+1 < len(line) && line[i+1] == '"' {
					out = append(out, '"')
					i++
				} else {
					inQuote = false
				}
			case inQuote:
				out = append(out, b)
			case b == '"' && fieldStart:
				inQuote, quotedField = true, true
				fieldStart = false
			case b == '"':
				return nil, &RowError{Where: c.Where(), Pos: int64(c.line), Msg: "a quote inside an unquoted field"}
			case b == ',':
				fields = append(fields, len(out))
				fieldStart, quotedField = true, false
			default:
				if quotedField {
					return nil, &RowError{Where: c.Where(), Pos: int64(c.line), Msg: "text after a closing quote"}
				}
				out = append(out, b)
				fieldStart = false
			}
		}
		if !inQuote {
			break
		}
		out = append(out, '\n')
		more, err := c.readLine()
		if err != nil {
			if errors.Is(err, io.EOF) {
				return nil, &RowError{Where: c.Where(), Pos: int64(c.line), Msg: "a quoted field is never closed (the file ends inside it)"}
			}
			return nil, err
		}
		line = more
	}
	fields = append(fields, len(out))
	c.buf = out
	s := string(out)
	res := c.fields[:0]
	start := 0
	for _, end := range fields {
		res = append(res, s[start:end])
		start = end
	}
	c.fields = res
	return res, nil
}

// readLine returns the next line without its line ending.
func (c *fastCSV) readLine() ([]byte, error) {
	line, err := c.r.ReadSlice('\n')
	if errors.Is(err, bufio.ErrBufferFull) {
		// A line longer than the buffer: gather it.
		long := append([]byte(nil), line...)
		for errors.Is(err, bufio.ErrBufferFull) {
			line, err = c.r.ReadSlice('\n')
			long = append(long, line...)
		}
		line = long
	}
	if err != nil && !errors.Is(err, io.EOF) {
		return nil, fmt.Errorf("%s: %w", c.name, err)
	}
	if len(line) == 0 && errors.Is(err, io.EOF) {
		return nil, io.EOF
	}
	c.next++
	line = bytes.TrimSuffix(line, []byte{'\n'})
	return bytes.TrimSuffix(line, []byte{'\r'}), nil
}

func (c *fastCSV) Columns() []string { return c.cols }

func (c *fastCSV) Next() ([]Cell, error) {
	for {
		rec, err := c.record()
		if err != nil {
			return nil, err
		}
		if rec == nil {
			continue // a blank line, skipped as encoding/csv skips it
		}
		if len(rec) != len(c.cols) {
			return nil, &RowError{Where: c.Where(), Pos: int64(c.line), Msg: fmt.Sprintf("has %d fields, the header %d", len(rec), len(c.cols))}
		}
		for i, s := range rec {
			c.cells[i] = Cell{Kind: Text, S: s}
		}
		return c.cells, nil
	}
}

func (c *fastCSV) Where() string       { return c.At(int64(c.line)) }
func (c *fastCSV) Pos() int64          { return int64(c.line) }
func (c *fastCSV) At(pos int64) string { return fmt.Sprintf("%s:%d", c.name, pos) }
func (c *fastCSV) Close() error        { return c.f.Close() }
