package table

import (
	"bytes"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/parquet-go/parquet-go"
)

func write(t *testing.T, name, content string) string {
	t.Helper()
	p := filepath.Join(t.TempDir(), name)
	if err := os.WriteFile(p, []byte(content), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

func readAll(t *testing.T, path string) ([]string, [][]Cell, error) {
	t.Helper()
	f, err := FormatOf(path, "")
	if err != nil {
		return nil, nil, err
	}
	r, err := Open(path, f)
	if err != nil {
		return nil, nil, err
	}
	defer r.Close()
	var rows [][]Cell
	for {
		cells, err := r.Next()
		if errors.Is(err, io.EOF) {
			return r.Columns(), rows, nil
		}
		if err != nil {
			return r.Columns(), rows, err
		}
		rows = append(rows, append([]Cell(nil), cells...))
	}
}

func TestCSV(t *testing.T) {
	p := write(t, "golden.csv", "\ufeffparcel_id,was_late,score\nLK-1,1,0.91\nLK-2,0,\n\"LK,3\",0,0.2\n")
	cols, rows, err := readAll(t, p)
	if err != nil {
		t.Fatal(err)
	}
	if strings.Join(cols, "|") != "parcel_id|was_late|score" || len(rows) != 3 {
		t.Fatalf("cols %v rows %d", cols, len(rows))
	}
	if f, ok := rows[0][2].Float(); !ok || f != 0.91 {
		t.Errorf("score %v %v", f, ok)
	}
	if !rows[1][2].IsNull() || rows[2][0].S != "LK,3" {
		t.Errorf("rows %+v", rows)
	}
}

func TestJSONL(t *testing.T) {
	p := write(t, "golden.jsonl", `{"parcel_id":"LK-1","was_late":true,"score":0.91}`+"\n\n"+`{"parcel_id":"LK-2","was_late":false,"score":null}`+"\n")
	cols, rows, err := readAll(t, p)
	if err != nil {
		t.Fatal(err)
	}
	if strings.Join(cols, "|") != "parcel_id|score|was_late" || len(rows) != 2 {
		t.Fatalf("cols %v rows %d", cols, len(rows))
	}
	if rows[0][2].Kind != Bool || rows[0][2].F != 1 || rows[0][1].F != 0.91 || !rows[1][1].IsNull() {
		t.Errorf("rows %+v", rows)
	}
}

type parcel struct {
	ID      string  `parquet:"parcel_id"`
	Late    bool    `parquet:"was_late"`
	Score   float64 `parquet:"score"`
	Depot   string  `parquet:"depot"`
	Weight  int64   `parquet:"weight_g"`
	Score32 float32 `parquet:"score32"`
}

func TestParquet(t *testing.T) {
	p := filepath.Join(t.TempDir(), "golden.parquet")
	f, err := os.Create(p)
	if err != nil {
		t.Fatal(err)
	}
	w := parquet.NewGenericWriter[parcel](f)
	rows := []parcel{{"LK-1", true, 0.91, "harbour", 1200, 0.5}, {"LK-2", false, 0.12, "north", 800, 0.25}}
	if _, err := w.Write(rows); err != nil {
		t.Fatal(err)
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	f.Close()
	cols, got, err := readAll(t, p)
	if err != nil {
		t.Fatal(err)
	}
	idx := map[string]int{}
	for i, c := range cols {
		idx[c] = i
	}
	if len(got) != 2 || got[0][idx["parcel_id"]].S != "LK-1" || got[0][idx["was_late"]].F != 1 ||
		got[1][idx["score"]].F != 0.12 || got[0][idx["weight_g"]].F != 1200 || got[1][idx["score32"]].F != 0.25 || got[1][idx["depot"]].S != "north" {
		t.Errorf("cols %v rows %+v", cols, got)
	}
}

func TestErrorsNameTheLine(t *testing.T) {
	cases := []struct {
		name, file, content, want string
	}{
		{"empty CSV", "a.csv", "", "the file is empty"},
		{"ragged CSV", "a.csv", "a,b\n1,2\n3\n", "a.csv:3: has 1 fields, the header 2"},
		{"duplicate column", "a.csv", "a,a\n1,2\n", `column "a" appears twice`},
		{"bad JSON", "a.jsonl", "{\"a\":1}\n{\"a\":\n", "a.jsonl:2: not a JSON object"},
		{"new key", "a.jsonl", "{\"a\":1}\n{\"b\":2}\n", `a.jsonl:2: key "b" is not among the columns`},
		{"nested value", "a.jsonl", "{\"a\":{\"x\":1}}\n", `a.jsonl:1: key "a": want a number, text`},
		{"not parquet", "a.parquet", "PAR1 but not really", "not a readable Parquet file"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, _, err := readAll(t, write(t, c.file, c.content))
			if err == nil || !strings.Contains(err.Error(), c.want) {
				t.Errorf("error %v, want %q", err, c.want)
			}
		})
	}
}

// A malformed row is a RowError the reader goes on past: the data checks
// count such rows instead of giving up on the batch.
func TestReadersGoOnPastMalformedRows(t *testing.T) {
	cases := []struct {
		file, content string
		want          []string // the first cell of each good row
		bad           []int64  // the lines of the malformed rows
	}{
		{"a.csv", "a,b\n1,2\n3\n4,5\n\"x\"y,6\n7,8\n9,\"cut", []string{"1", "4", "7"}, []int64{3, 5, 7}},
		{"a.jsonl", "{\"a\":1}\n{\"a\":\n{\"a\":2}\n{\"b\":3}\n{\"a\":4}\n{\"a\":5", []string{"1", "2", "4"}, []int64{2, 4, 6}},
	}
	for _, c := range cases {
		t.Run(c.file, func(t *testing.T) {
			p := write(t, c.file, c.content)
			f, _ := FormatOf(p, "")
			r, err := Open(p, f)
			if err != nil {
				t.Fatal(err)
			}
			defer r.Close()
			var good []string
			var bad []int64
			for {
				cells, err := r.Next()
				var rowErr *RowError
				if errors.As(err, &rowErr) {
					if rowErr.Pos != r.Pos() {
						t.Errorf("RowError at %d, reader at %d", rowErr.Pos, r.Pos())
					}
					bad = append(bad, rowErr.Pos)
					continue
				}
				if errors.Is(err, io.EOF) {
					break
				}
				if err != nil {
					t.Fatal(err)
				}
				good = append(good, cells[0].S)
			}
			if strings.Join(good, " ") != strings.Join(c.want, " ") {
				t.Errorf("good rows %v, want %v", good, c.want)
			}
			if fmt.Sprint(bad) != fmt.Sprint(c.bad) {
				t.Errorf("malformed rows at %v, want %v", bad, c.bad)
			}
		})
	}
}

func TestFormatOf(t *testing.T) {
	for path, want := range map[string]Format{"a.csv": CSV, "b.JSONL": JSONL, "c.ndjson": JSONL, "d.parquet": Parquet} {
		if f, err := FormatOf(path, ""); err != nil || f != want {
			t.Errorf("%s: %v %v", path, f, err)
		}
	}
	if _, err := FormatOf("golden.txt", ""); err == nil || !strings.Contains(err.Error(), "name it") {
		t.Errorf("unknown extension: %v", err)
	}
	if f, err := FormatOf("golden.txt", "csv"); err != nil || f != CSV {
		t.Errorf("given format: %v %v", f, err)
	}
}

// fuzzRead reads a file of any content to its end: never a panic or a
// hang, and every refusal names the file (a malformed row, its line too).
func fuzzRead(t *testing.T, name string, data []byte) {
	p := filepath.Join(t.TempDir(), name)
	if err := os.WriteFile(p, data, 0o644); err != nil {
		t.Fatal(err)
	}
	f, _ := FormatOf(p, "")
	r, err := Open(p, f)
	if err != nil {
		if !strings.Contains(err.Error(), p) {
			t.Fatalf("refusal %q does not name the file", err)
		}
		return
	}
	defer r.Close()
	for i := 0; i < 100000; i++ {
		cells, err := r.Next()
		var rowErr *RowError
		if errors.As(err, &rowErr) {
			if !strings.HasPrefix(rowErr.Where, p) || rowErr.Msg == "" {
				t.Fatalf("malformed row %q: where %q does not name the file, or no message", err, rowErr.Where)
			}
			continue // the readers go on past a malformed row
		}
		if errors.Is(err, io.EOF) {
			return
		}
		if err != nil {
			if !strings.Contains(err.Error(), p) {
				t.Fatalf("read error %q does not name the file", err)
			}
			return
		}
		for _, c := range cells {
			c.Float()
			c.IsNull()
		}
		_ = r.Where()
	}
}

func FuzzCSV(f *testing.F) {
	for _, s := range []string{"a,b\n1,2\n", "id,label\n\"x\",1\n\"y\"\"\",0\n", "a\n\n", "a,b\n1\n", "\ufeffa\n1e309\n"} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, data []byte) { fuzzRead(t, "f.csv", data) })
}

func FuzzJSONL(f *testing.F) {
	for _, s := range []string{"{\"a\":1}\n", "{\"a\":\"x\",\"b\":null}\n{\"a\":true}\n", "{}\n", "[1]\n", "{\"a\":1e999}\n"} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, data []byte) { fuzzRead(t, "f.jsonl", data) })
}

func FuzzParquet(f *testing.F) {
	f.Add([]byte("PAR1"))
	f.Add([]byte("PAR1\x00\x00\x00\x00PAR1"))
	f.Fuzz(func(t *testing.T, data []byte) { fuzzRead(t, "f.parquet", data) })
}

// FuzzCSVAgainstStdlib: wherever encoding/csv reads a file without error,
// the fast reader reads the same fields.
func FuzzCSVAgainstStdlib(f *testing.F) {
	for _, s := range []string{"a,b\n1,2\n", "a,b\n\"x,y\",\"he said \"\"hi\"\"\"\n", "a,b\r\n1,2\r\n", "a,b\n\"multi\nline\",3\n", "a\n\n1\n", "a,b\n1,\n,2\n"} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		std := csv.NewReader(bytes.NewReader(data))
		want, err := std.ReadAll()
		if err != nil || len(want) == 0 {
			return
		}
		for _, rec := range want[1:] {
			if len(rec) != len(want[0]) {
				return
			}
		}
		p := filepath.Join(t.TempDir(), "f.csv")
		if err := os.WriteFile(p, data, 0o644); err != nil {
			t.Fatal(err)
		}
		r, err := Open(p, CSV)
		if err != nil {
			if strings.Contains(err.Error(), "appears twice") || strings.Contains(err.Error(), "has no name") {
				return // the header check is ours
			}
			t.Fatalf("fast reader refused what encoding/csv read: %v", err)
		}
		defer r.Close()
		for i, rec := range want[1:] {
			cells, err := r.Next()
			if err != nil {
				t.Fatalf("row %d: %v (encoding/csv read %q)", i+1, err, rec)
			}
			for j := range rec {
				if cells[j].S != rec[j] {
					t.Fatalf("row %d field %d: %q, encoding/csv %q", i+1, j, cells[j].S, rec[j])
				}
			}
		}
		if _, err := r.Next(); !errors.Is(err, io.EOF) {
			t.Fatalf("more rows than encoding/csv: %v", err)
		}
	})
}

func TestTrimIsTrimSpace(t *testing.T) {
	for _, s := range []string{"", " ", "a", " a", "a ", "\ta\n", "12.5", "\u00a0x", "x\u00a0", "\u0085", "é", " é ", "x\u2003"} {
		if Trim(s) != strings.TrimSpace(s) {
			t.Errorf("Trim(%q) = %q, strings.TrimSpace %q", s, Trim(s), strings.TrimSpace(s))
		}
	}
}

// A CSV that starts with a byte-order mark and quotes its header (what a
// dataframe library writes with the utf-8-sig encoding and quoted headers)
// reads like any other: the mark is dropped before the header is parsed.
func TestCSVByteOrderMarkBeforeAQuotedHeader(t *testing.T) {
	p := write(t, "golden.csv", "\ufeff\"parcel_id\",\"was_late\",\"score\"\n\"LK-1\",1,0.91\n")
	cols, rows, err := readAll(t, p)
	if err != nil {
		t.Fatal(err)
	}
	if strings.Join(cols, "|") != "parcel_id|was_late|score" || len(rows) != 1 || rows[0][0].S != "LK-1" {
		t.Fatalf("cols %q rows %+v", cols, rows)
	}
	// The same for JSON Lines.
	p = write(t, "golden.jsonl", "\ufeff"+`{"parcel_id":"LK-1","was_late":1,"score":0.91}`+"\n")
	cols, rows, err = readAll(t, p)
	if err != nil || strings.Join(cols, "|") != "parcel_id|score|was_late" || len(rows) != 1 {
		t.Fatalf("JSON Lines with a byte-order mark: cols %q rows %+v err %v", cols, rows, err)
	}
}
