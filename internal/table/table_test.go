package table

import (
	"errors"
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

// fuzzRead reads a file of any content to its end: never a panic.
func fuzzRead(t *testing.T, name string, data []byte) {
	p := filepath.Join(t.TempDir(), name)
	if err := os.WriteFile(p, data, 0o644); err != nil {
		t.Fatal(err)
	}
	f, _ := FormatOf(p, "")
	r, err := Open(p, f)
	if err != nil {
		return
	}
	defer r.Close()
	for i := 0; i < 100000; i++ {
		cells, err := r.Next()
		if err != nil {
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
