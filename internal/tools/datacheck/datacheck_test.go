package datacheck

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"plumbline.dev/plumbline/internal/contract/checkreport"
)

func write(t testing.TB, dir, name, content string) string {
	t.Helper()
	p := filepath.Join(dir, name)
	if err := os.WriteFile(p, []byte(content), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// rows renders CSV rows from a function of the row number.
func rows(header string, n int, row func(i int) string) string {
	var b strings.Builder
	b.WriteString(header + "\n")
	for i := 0; i < n; i++ {
		b.WriteString(row(i) + "\n")
	}
	return b.String()
}

func opts(ref, cur string) Options {
	o := DefaultOptions()
	o.Reference, o.Current = ref, cur
	return o
}

func findingsByCheck(r *Report) map[string]Finding {
	m := map[string]Finding{}
	for _, f := range r.DataQuality.Findings {
		key := f.Check
		if f.Column != "" {
			key += "/" + f.Column
		}
		m[key] = f
	}
	return m
}

var depots = []string{"Ashby", "Brindle", "Corran", "Dunmore"}

// A clean reference of 1,000 parcels.
func reference(i int) string {
	return fmt.Sprintf("P%05d,%d,%s,LP%d,%d", i, 1+i%97, depots[i%4], 1+i%13, 24*(1+i%3))
}

const header = "parcel_id,distance_km,depot,postcode,promised_hours"

// Every kind of finding, each naming its column, its count and the row of
// its first example.
func TestQualityFindings(t *testing.T) {
	dir := t.TempDir()
	ref := write(t, dir, "ref.csv", rows(header, 1000, reference))
	cur := rows(header, 1000, func(i int) string {
		id, dist, depot, pc, hours := fmt.Sprintf("P%05d", i), fmt.Sprint(1+i%97), depots[i%4], fmt.Sprintf("LP%d", 1+i%13), fmt.Sprint(24*(1+i%3))
		switch {
		case i%10 == 3: // 10% missing postcodes
			pc = ""
		case i == 20 || i == 21 || i == 22: // three type errors
			dist = "n/a"
		case i >= 34 && i < 39: // five out of range
			dist = "-999"
		case i == 40:
			depot = "Fenwick" // a new depot
		case i == 50 || i == 51:
			hours = ""
		}
		if i == 60 || i == 61 {
			id = "P00001" // two repeated ids
		}
		return strings.Join([]string{id, dist, depot, pc, hours}, ",")
	})
	// Row 100 repeated exactly, twice; a ragged row; a cut-off last row.
	lines := strings.Split(strings.TrimSuffix(cur, "\n"), "\n")
	cur = strings.Join(lines, "\n") + "\n" + lines[101] + "\n" + lines[101] + "\n" + "P09999,1,Ashby\n" + "P09998,3,Cor"
	curPath := write(t, dir, "cur.csv", cur)
	min, max := 0.0, 500.0
	o := opts(ref, curPath)
	o.Schema = &Schema{ID: "parcel_id", Columns: []ColumnSchema{
		{Name: "distance_km", Type: Numeric, Min: &min, Max: &max},
		{Name: "depot", Type: Categorical, Categories: depots, Closed: true},
		{Name: "postcode", Type: Categorical},
		{Name: "promised_hours", Type: Numeric, Required: true},
	}}
	o.Limits.DuplicateRows = 0
	o.Limits.MalformedRows = 0
	o.Limits.Unseen = 0
	rep, err := Run(o)
	if err != nil {
		t.Fatal(err)
	}
	if rep.DataQuality.OK {
		t.Fatal("data quality ok on a broken batch")
	}
	got := findingsByCheck(rep)
	want := []struct {
		key     string
		count   int64
		example string
	}{
		{"truncated", 1, "cur.csv:1005: has 3 fields, the header 5"},
		{"malformed_rows/", 1, "cur.csv:1004: has 3 fields, the header 5"},
		{"missing/postcode", 100, "cur.csv:5"},
		{"type_errors/distance_km", 3, `cur.csv:22 ("n/a")`},
		{"out_of_range/distance_km", 5, `cur.csv:36 ("-999")`},
		{"unseen_categories/depot", 1, `cur.csv:42 ("Fenwick")`},
		{"missing/promised_hours", 2, "cur.csv:52"},
		{"duplicate_rows", 2, "cur.csv:1002 repeats cur.csv:102"},
		{"duplicate_ids/parcel_id", 4, "cur.csv:62 repeats cur.csv:3"},
	}
	for _, w := range want {
		key := strings.TrimSuffix(w.key, "/")
		f, ok := got[key]
		if !ok {
			t.Errorf("no %s finding; findings: %+v", key, rep.DataQuality.Findings)
			continue
		}
		if ex := strings.ReplaceAll(f.Example, dir+string(filepath.Separator), ""); f.Count != w.count || ex != w.example {
			t.Errorf("%s: count %d example %q, want %d and %q (%s)", key, f.Count, f.Example, w.count, w.example, f.Message)
		}
		if f.Message == "" {
			t.Errorf("%s: no message", key)
		}
	}
	if len(got) != len(want) {
		t.Errorf("%d findings, want %d: %+v", len(got), len(want), rep.DataQuality.Findings)
	}
	if rep.Current.Rows != 1002 || rep.Current.MalformedRows != 2 {
		t.Errorf("current rows %d malformed %d, want 1002 and 2", rep.Current.Rows, rep.Current.MalformedRows)
	}
}

// The limits let ordinary noise through: the same broken batch with wide
// limits raises only what has no limit.
func TestLimitsLetNoiseThrough(t *testing.T) {
	dir := t.TempDir()
	ref := write(t, dir, "ref.csv", rows(header, 1000, reference))
	cur := write(t, dir, "cur.csv", rows(header, 1000, func(i int) string {
		if i == 7 {
			return fmt.Sprintf("P%05d,n/a,%s,,24", i, depots[0])
		}
		return reference(i)
	}))
	rep, err := Run(opts(ref, cur))
	if err != nil {
		t.Fatal(err)
	}
	// One type error in 1,000 rows is 0.1%, not above the 0.1% limit; one
	// missing postcode is far under the 5% increase allowed.
	if !rep.DataQuality.OK {
		t.Errorf("findings on a batch within its limits: %+v", rep.DataQuality.Findings)
	}
}

// Inferred categories stay open: a new depot is drift, not a finding.
func TestInferredCategoriesStayOpen(t *testing.T) {
	dir := t.TempDir()
	ref := write(t, dir, "ref.csv", rows(header, 2000, reference))
	cur := write(t, dir, "cur.csv", rows(header, 2000, func(i int) string {
		if i%3 == 0 {
			return fmt.Sprintf("P%05d,%d,Fenwick,LP%d,%d", i, 1+i%97, 1+i%13, 24*(1+i%3))
		}
		return reference(i)
	}))
	o := opts(ref, cur)
	o.ID = "parcel_id"
	rep, err := Run(o)
	if err != nil {
		t.Fatal(err)
	}
	if !rep.DataQuality.OK {
		t.Errorf("a new depot in an inferred schema is a finding: %+v", rep.DataQuality.Findings)
	}
	depot := column(t, rep, "depot")
	if depot.Current.Unseen != 667 || !depot.Drift.Drifted {
		t.Errorf("depot: %d unseen, drifted %v; want 667 and drifted", depot.Current.Unseen, depot.Drift.Drifted)
	}
	last := depot.Drift.Bins[len(depot.Drift.Bins)-1]
	if last.Category != unseenBucket || math.Abs(last.Current-667.0/2000) > 1e-12 || last.Reference != 0 {
		t.Errorf("unseen bucket %+v", last)
	}
}

func column(t *testing.T, r *Report, name string) Column {
	t.Helper()
	for _, c := range r.Columns {
		if c.Name == name {
			return c
		}
	}
	t.Fatalf("no column %s", name)
	return Column{}
}

func TestEmptyUnreadableAndMissing(t *testing.T) {
	dir := t.TempDir()
	ref := write(t, dir, "ref.csv", rows(header, 100, reference))
	cases := []struct {
		name, content, check string
	}{
		{"header only", header + "\n", CheckEmpty},
		{"zero bytes", "", CheckUnreadable},
		{"no such column", "parcel_id,distance_km\nP1,3\n", CheckMissingColumn},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			rep, err := Run(opts(ref, write(t, t.TempDir(), "cur.csv", c.content)))
			if err != nil {
				t.Fatal(err)
			}
			if rep.DataQuality.OK || rep.DataQuality.Findings[0].Check != c.check {
				t.Errorf("findings %+v, want %s first", rep.DataQuality.Findings, c.check)
			}
			if rep.Drift.Detected {
				t.Error("drift detected on a batch that cannot be judged")
			}
			if _, _, err := Compact(rep); err != nil {
				t.Errorf("compact report: %v", err)
			}
		})
	}
	t.Run("missing current file", func(t *testing.T) {
		_, err := Run(opts(ref, filepath.Join(dir, "nope.csv")))
		var ie *InputError
		if !errors.As(err, &ie) || !strings.Contains(err.Error(), "--current") {
			t.Errorf("error %v, want an input error naming --current", err)
		}
	})
	t.Run("empty reference", func(t *testing.T) {
		_, err := Run(opts(write(t, t.TempDir(), "ref.csv", header+"\n"), ref))
		if err == nil || !strings.Contains(err.Error(), "--reference") || !strings.Contains(err.Error(), "no rows") {
			t.Errorf("error %v, want the reference named as empty", err)
		}
	})
	t.Run("schema column not in reference", func(t *testing.T) {
		o := opts(ref, ref)
		o.Schema = &Schema{Columns: []ColumnSchema{{Name: "weight_kg", Type: Numeric}}}
		_, err := Run(o)
		if err == nil || !strings.Contains(err.Error(), `no column "weight_kg"`) {
			t.Errorf("error %v, want the missing column named", err)
		}
	})
}

// The inferred schema: numbers, categories, free text left alone; bounds
// widened; written out, read back, and giving the same figures.
func TestInferWriteAndReuseSchema(t *testing.T) {
	dir := t.TempDir()
	hdr := "parcel_id,distance_km,depot,note,weight_kg"
	gen := func(seed uint64) func(int) string {
		rng := rand.New(rand.NewPCG(seed, 9))
		return func(i int) string {
			return fmt.Sprintf("P%05d,%.2f,%s,note %d,%.3f", i, 400+rng.Float64()*90, depots[rng.IntN(4)], rng.IntN(1_000_000), rng.ExpFloat64())
		}
	}
	ref := write(t, dir, "ref.csv", rows(hdr, 3000, gen(1)))
	cur := write(t, dir, "cur.csv", rows(hdr, 3000, gen(2)))
	o := opts(ref, cur)
	o.ID = "parcel_id"
	first, err := Run(o)
	if err != nil {
		t.Fatal(err)
	}
	s := first.Decided
	types := map[string]string{}
	for _, c := range s.Columns {
		types[c.Name] = c.Type
	}
	if types["distance_km"] != Numeric || types["depot"] != Categorical || types["note"] != Ignore || types["weight_kg"] != Numeric {
		t.Errorf("inferred types %v", types)
	}
	if _, listed := types["parcel_id"]; listed || s.ID != "parcel_id" {
		t.Errorf("the id column should be the schema's id, not a feature: %+v", s)
	}
	dist := s.column("distance_km")
	ref0 := column(t, first, "distance_km").Reference
	// Widened by three widths each side, rounded outward to three
	// significant digits of the widening: a number a person would write.
	if w := 3 * (*ref0.Max - *ref0.Min); *dist.Min > *ref0.Min-w || *dist.Min < *ref0.Min-w-w/100 || *dist.Max < *ref0.Max+w || *dist.Max > *ref0.Max+w+w/100 {
		t.Errorf("bounds [%v, %v], want the observed [%v, %v] widened by three widths (%v), rounded outward", *dist.Min, *dist.Max, *ref0.Min, *ref0.Max, w)
	}
	for _, b := range []float64{*dist.Min, *dist.Max} {
		if txt := strconv.FormatFloat(b, 'g', -1, 64); len(strings.TrimLeft(strings.ReplaceAll(txt, ".", ""), "-0")) > 6 {
			t.Errorf("bound %s is not a clean number", txt)
		}
	}
	if wk := s.column("weight_kg"); *wk.Min != 0 {
		t.Errorf("weight_kg is never negative, its lower bound %v should stay 0", *wk.Min)
	}
	path := filepath.Join(dir, "schema.yaml")
	if err := s.Write(path, ref); err != nil {
		t.Fatal(err)
	}
	raw, _ := os.ReadFile(path)
	if !bytes.HasPrefix(raw, []byte("# plumbline datacheck schema")) {
		t.Errorf("written schema lacks its header:\n%s", raw)
	}
	back, err := LoadSchema(path)
	if err != nil {
		t.Fatal(err)
	}
	a, _ := json.Marshal(s)
	b, _ := json.Marshal(back)
	if !bytes.Equal(a, b) {
		t.Errorf("schema changed on its way through the file:\n%s\n%s", a, b)
	}
	o.Schema, o.SchemaFile, o.ID = back, path, ""
	second, err := Run(o)
	if err != nil {
		t.Fatal(err)
	}
	for _, name := range []string{"distance_km", "depot", "weight_kg"} {
		d1, d2 := column(t, first, name).Drift, column(t, second, name).Drift
		if *d1.PValue != *d2.PValue || *d1.PSI != *d2.PSI {
			t.Errorf("%s: p %v/%v PSI %v/%v with the inferred and the written schema", name, *d1.PValue, *d2.PValue, *d1.PSI, *d2.PSI)
		}
	}
}

func TestSchemaValidation(t *testing.T) {
	cases := []struct{ yaml, want string }{
		{"columns: []", "columns: list at least one column"},
		{"columns:\n- name: a\n  type: number", `columns[0] (a).type: "number"; want numeric, categorical or ignore`},
		{"columns:\n- name: a\n  type: numeric\n- name: a\n  type: ignore", `columns[1] (a).name: "a" is listed twice`},
		{"columns:\n- name: a\n  type: categorical\n  min: 1", "min and max bound numeric columns only"},
		{"columns:\n- name: a\n  type: numeric\n  min: 5\n  max: 1", "min 5 is above max 1"},
		{"columns:\n- name: a\n  type: numeric\n  categories: [x]", "only a categorical column has categories"},
		{"columns:\n- name: a\n  type: categorical\n  categories: [x, x]", `"x" is listed twice`},
		{"id: a\ncolumns:\n- name: a\n  type: numeric", "a is the id column"},
		{"columns:\n- name: a\n  typ: numeric", `columns[0] (a).typ: unknown key; a column has name, type,`},
		{"columns:\n- name: a\n  type: numeric\n  min: low", `columns[0] (a).min: want a number, got the text "low"`},
		{"columns:\n- name: a\n  type: numeric\n  required: \"yes\"", `columns[0] (a).required: want true or false, got the text "yes"`},
		{"columns:\n- name: a\n  type: categorical\n  closed: true", "columns[0] (a).closed: a closed column lists its categories"},
		{"columns:\n- name: a\n  type: numeric\n  closed: true", "columns[0] (a).closed: only a categorical column's categories can be closed"},
		{"colums:\n- name: a", "colums: unknown key; a schema has id and columns"},
		{"columns: {name: a}", "columns: want a list of columns, got a mapping"},
		{"- a", "want a mapping with the keys id and columns, got a list"},
		{"columns:\n- type: numeric", "columns[0].name: name the column"},
	}
	for _, c := range cases {
		p := write(t, t.TempDir(), "s.yaml", c.yaml)
		_, err := LoadSchema(p)
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%q: error %v, want %q", c.yaml, err, c.want)
		}
	}
}

// The result does not depend on how many workers read the columns.
func TestWorkersDoNotChangeTheResult(t *testing.T) {
	dir := t.TempDir()
	rng := rand.New(rand.NewPCG(7, 7))
	gen := func(shift float64) func(int) string {
		return func(i int) string {
			return fmt.Sprintf("P%05d,%.3f,%s,LP%d,%d", i, 20+shift+rng.NormFloat64()*5, depots[rng.IntN(4)], rng.IntN(20), 24*(1+rng.IntN(3)))
		}
	}
	ref := write(t, dir, "ref.csv", rows(header, 5000, gen(0)))
	cur := write(t, dir, "cur.csv", rows(header, 5000, gen(1)))
	var out []string
	for _, w := range []int{1, 2, 5} {
		o := opts(ref, cur)
		o.Workers, o.SampleSize = w, 1000 // sampled, so the draws matter
		rep, err := Run(o)
		if err != nil {
			t.Fatal(err)
		}
		var b bytes.Buffer
		if err := WriteJSON(&b, rep); err != nil {
			t.Fatal(err)
		}
		out = append(out, b.String())
	}
	if out[0] != out[1] || out[0] != out[2] {
		t.Error("reports differ with 1, 2 and 5 workers")
	}
}

// Weights: one drifted feature of four is a share of 0.25; weighted 3 it is
// half; weighted 0 it does not count.
func TestWeights(t *testing.T) {
	dir := t.TempDir()
	rng := rand.New(rand.NewPCG(3, 3))
	gen := func(shift float64) func(int) string {
		return func(i int) string {
			return fmt.Sprintf("P%05d,%.3f,%s,LP%d,%d", i, 20+shift+rng.NormFloat64()*5, depots[rng.IntN(4)], rng.IntN(20), 24*(1+rng.IntN(3)))
		}
	}
	ref := write(t, dir, "ref.csv", rows(header, 4000, gen(0)))
	cur := write(t, dir, "cur.csv", rows(header, 4000, gen(5)))
	for _, c := range []struct {
		weights  string
		weight   float64
		detected bool
	}{{"", 0.25, true}, {"distance_km=3", 0.5, true}, {"distance_km=0", 0, false}, {"depot=3,postcode=2", 1.0 / 7, false}} {
		o := opts(ref, cur)
		w, err := ParseWeights(c.weights)
		if err != nil {
			t.Fatal(err)
		}
		o.Weights = w
		rep, err := Run(o)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(rep.Drift.DriftedWeight-c.weight) > 1e-12 || rep.Drift.Detected != c.detected || strings.Join(rep.Drift.Drifted, ",") != "distance_km" {
			t.Errorf("weights %q: drifted weight %v detected %v drifted %v; want %v, %v, [distance_km]", c.weights, rep.Drift.DriftedWeight, rep.Drift.Detected, rep.Drift.Drifted, c.weight, c.detected)
		}
	}
	o := opts(ref, cur)
	o.Weights = map[string]float64{"parcel_id": 2}
	if _, err := Run(o); err == nil || !strings.Contains(err.Error(), `--weights: "parcel_id" is not a feature`) {
		t.Errorf("weighting a column that is not a feature: %v", err)
	}
}

func TestParseWeights(t *testing.T) {
	w, err := ParseWeights(" depot=3, distance_km=0.5 ")
	if err != nil || w["depot"] != 3 || w["distance_km"] != 0.5 {
		t.Errorf("ParseWeights: %v %v", w, err)
	}
	for _, bad := range []string{"depot", "=3", "depot=-1", "depot=x", "depot=1,depot=2", "depot=NaN"} {
		if _, err := ParseWeights(bad); err == nil {
			t.Errorf("ParseWeights(%q) accepted", bad)
		}
	}
}

// The reservoir keeps a uniform sample: over many streams, every tenth of
// the stream lands in the sample about equally often. The chi-square
// statistic over ten equal cells has 9 degrees of freedom; 27.88 is its
// 0.999 quantile (standard chi-square tables).
func TestReservoirIsUniform(t *testing.T) {
	const n, k, reps = 5000, 50, 2000
	counts := make([]float64, 10)
	for r := 0; r < reps; r++ {
		res := newReservoir(k, uint64(r), 0)
		for i := 0; i < n; i++ {
			res.add(float64(i))
		}
		if len(res.vals) != k {
			t.Fatalf("sample of %d, want %d", len(res.vals), k)
		}
		for _, v := range res.vals {
			counts[int(v)*10/n]++
		}
	}
	expected := float64(reps*k) / 10
	chi := 0.0
	for _, c := range counts {
		chi += (c - expected) * (c - expected) / expected
	}
	if chi > 27.88 {
		t.Errorf("chi-square %.1f over the stream's tenths (counts %v): not uniform", chi, counts)
	}
}

func TestQuantileBins(t *testing.T) {
	sorted := []float64{1, 2, 3, 4, 5, 6, 7, 8, 9, 10}
	edges := quantileEdges(sorted, 5)
	if fmt.Sprint(edges) != "[2 4 6 8]" {
		t.Errorf("edges %v, want [2 4 6 8]", edges)
	}
	if got := binCounts([]float64{0, 2, 2.5, 9, 11, 12}, edges); fmt.Sprint(got) != "[2 1 0 0 3]" {
		t.Errorf("counts %v", got)
	}
	// Ties merge bins: a column mostly zero has fewer bins, none empty in
	// the reference.
	tied := []float64{0, 0, 0, 0, 0, 0, 0, 1, 2, 3}
	if e := quantileEdges(tied, 5); fmt.Sprint(e) != "[0 1]" {
		t.Errorf("tied edges %v, want [0 1]", e)
	}
	if e := quantileEdges([]float64{4, 4, 4}, 10); len(e) != 0 {
		t.Errorf("one value: edges %v, want none", e)
	}
}

// The compact report carries the answers and reads back under the
// controller's strict parser.
func TestCompactReport(t *testing.T) {
	dir := t.TempDir()
	ref := write(t, dir, "ref.csv", rows(header, 500, reference))
	cur := write(t, dir, "cur.csv", rows(header, 500, func(i int) string {
		if i%2 == 0 {
			return fmt.Sprintf("P%05d,%d,%s,,%d", i, 1+i%97, depots[i%4], 24*(1+i%3))
		}
		return reference(i)
	}))
	rep, err := Run(opts(ref, cur))
	if err != nil {
		t.Fatal(err)
	}
	b, c, err := Compact(rep)
	if err != nil {
		t.Fatal(err)
	}
	parsed, err := checkreport.Parse(b)
	if err != nil {
		t.Fatal(err)
	}
	if parsed.Rows != 500 || parsed.ReferenceRows != 500 || parsed.DataQuality.OK || parsed.DataQuality.Findings[0].Column != "postcode" || c.Truncated {
		t.Errorf("compact report %s", b)
	}
}

// Inferred bounds are loose, yet a sentinel and a change of units fall
// outside them.
func TestInferredBoundsCatchSentinelsAndUnits(t *testing.T) {
	dir := t.TempDir()
	ref := write(t, dir, "ref.csv", rows(header, 1000, reference))
	cur := write(t, dir, "cur.csv", rows(header, 1000, func(i int) string {
		hours := 24 * (1 + i%3)
		if i%2 == 0 {
			hours *= 60 // minutes, not hours
		}
		dist := fmt.Sprint(1 + i%97)
		if i%20 == 0 {
			dist = "-999"
		}
		return fmt.Sprintf("P%05d,%s,%s,LP%d,%d", i, dist, depots[i%4], 1+i%13, hours)
	}))
	rep, err := Run(opts(ref, cur))
	if err != nil {
		t.Fatal(err)
	}
	got := findingsByCheck(rep)
	if f := got["out_of_range/distance_km"]; f.Count != 50 {
		t.Errorf("distance_km: %d out of range, want the 50 sentinels (%+v)", f.Count, rep.DataQuality.Findings)
	}
	// Hours run 24 to 72, so the bounds are [0, 216]: 48 and 72 hours in
	// minutes (2,880 and 4,320) are out, 24 hours in minutes (1,440) too.
	if f := got["out_of_range/promised_hours"]; f.Count != 500 {
		t.Errorf("promised_hours: %d out of range, want the 500 in minutes (%+v)", f.Count, rep.DataQuality.Findings)
	}
}

// The command's three ways out: usage errors (exit 2), input that cannot be
// checked (exit 1), and a run that found whatever it found (exit 0), with
// the full report, the table and the compact report written.
func TestCommand(t *testing.T) {
	dir := t.TempDir()
	ref := write(t, dir, "ref.csv", rows(header, 300, reference))
	cur := write(t, dir, "cur.csv", rows(header, 300, reference))
	for _, args := range [][]string{
		{"--current", cur},
		{"--reference", ref},
		{"--reference", ref, "--current", cur, "--alpha", "1.5"},
		{"--reference", ref, "--current", cur, "--max-unseen", "2"},
		{"--reference", ref, "--current", cur, "--weights", "depot"},
		{"--reference", ref, "--current", cur, "--bins", "1"},
		{"--reference", ref, "--current", cur, "extra"},
	} {
		var stderr bytes.Buffer
		if err := Command(args, io.Discard, &stderr); !errors.Is(err, ErrUsage) || stderr.Len() == 0 {
			t.Errorf("%v: %v (stderr %q), want a usage error explained", args, err, stderr.String())
		}
	}
	var ie *InputError
	if err := Command([]string{"--reference", filepath.Join(dir, "nope.csv"), "--current", cur}, io.Discard, io.Discard); !errors.As(err, &ie) {
		t.Errorf("missing reference: %v, want an input error", err)
	}
	badSchema := write(t, dir, "bad.yaml", "columns:\n- name: depot\n  type: text\n")
	if err := Command([]string{"--reference", ref, "--current", cur, "--schema", badSchema}, io.Discard, io.Discard); !errors.As(err, &ie) || !strings.Contains(err.Error(), "columns[0] (depot).type") {
		t.Errorf("bad schema: %v, want an input error naming the field", err)
	}

	out, term, schema := filepath.Join(dir, "full.json"), filepath.Join(dir, "term"), filepath.Join(dir, "schema.yaml")
	var stdout bytes.Buffer
	if err := Command([]string{"--reference", ref, "--current", cur, "--id", "parcel_id", "--out", out, "--termination-file", term, "--write-schema", schema}, &stdout, io.Discard); err != nil {
		t.Fatal(err)
	}
	mustHave := func(what, s string, wants ...string) {
		for _, w := range wants {
			if !strings.Contains(s, w) {
				t.Errorf("%s lacks %q:\n%s", what, w, s)
			}
		}
	}
	mustHave("table", stdout.String(), "data quality: ok", "drift: not enough to act on: 0 of 4 features drifted", "kolmogorov-smirnov", "chi-square", "check report:")
	full, _ := os.ReadFile(out)
	var rep Report
	if err := json.Unmarshal(full, &rep); err != nil || rep.Schema != ReportSchema || len(rep.Columns) != 4 {
		t.Errorf("full report: %v %+v", err, rep)
	}
	compact, _ := os.ReadFile(term)
	if _, err := checkreport.Parse(compact); err != nil {
		t.Errorf("compact report: %v", err)
	}
	written, _ := os.ReadFile(schema)
	mustHave("schema", string(written), "id: parcel_id", "name: distance_km", "type: numeric", "- Ashby")

	// --write-schema alone infers and writes, with no current batch.
	stdout.Reset()
	only := filepath.Join(dir, "only.yaml")
	if err := Command([]string{"--reference", ref, "--write-schema", only}, &stdout, io.Discard); err != nil {
		t.Fatal(err)
	}
	mustHave("stdout", stdout.String(), "schema of 5 columns", "300 rows")
	s, err := LoadSchema(only)
	if err != nil {
		t.Fatalf("the schema written alone does not load: %v", err)
	}
	// Without --id, the parcel id is a column, but one with a value on
	// every row: nothing to test for drift.
	if c := s.column("parcel_id"); c == nil || c.Type != Ignore {
		t.Errorf("parcel_id inferred as %+v, want ignore", c)
	}
}

// A schema written by --write-schema and kept leaves its categories open
// (closed: false), so a new value is drift, as with an inferred schema; a
// column marked closed: true makes it a blocking quality finding. The
// written file has each column's name first.
func TestCategoriesOpenUnlessClosed(t *testing.T) {
	dir := t.TempDir()
	ref := write(t, dir, "ref.csv", rows("parcel_id,depot,distance_km", 400, func(i int) string {
		return fmt.Sprintf("P%05d,%s,%d", i, depots[i%len(depots)], 10+i%37)
	}))
	cur := write(t, dir, "cur.csv", rows("parcel_id,depot,distance_km", 400, func(i int) string {
		d := depots[i%len(depots)]
		if i%4 == 0 {
			d = "Fenwick" // the new depot
		}
		return fmt.Sprintf("P%05d,%s,%d", i, d, 10+i%37)
	}))
	path := filepath.Join(dir, "schema.yaml")
	if err := Command([]string{"--reference", ref, "--id", "parcel_id", "--write-schema", path}, io.Discard, io.Discard); err != nil {
		t.Fatal(err)
	}
	raw, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	written := string(raw)
	for _, want := range []string{"  - name: depot\n    type: categorical\n    closed: false\n    categories:\n      - Ashby", "  - name: distance_km\n    type: numeric\n    min: 0\n"} {
		if !strings.Contains(written, want) {
			t.Errorf("written schema lacks %q:\n%s", want, written)
		}
	}
	run := func(schema string) *Report {
		t.Helper()
		o := opts(ref, cur)
		s, err := LoadSchema(schema)
		if err != nil {
			t.Fatal(err)
		}
		o.Schema, o.SchemaFile = s, schema
		rep, err := Run(o)
		if err != nil {
			t.Fatal(err)
		}
		return rep
	}
	unseen := func(rep *Report) bool {
		for _, f := range rep.DataQuality.Findings {
			if f.Check == "unseen_categories" && f.Column == "depot" {
				return true
			}
		}
		return false
	}
	open := run(path)
	if unseen(open) || !open.DataQuality.OK {
		t.Errorf("kept schema, open categories: a new depot is a quality finding: %+v", open.DataQuality.Findings)
	}
	if d := column(t, open, "depot").Drift; d == nil || d.PSI == nil || *d.PSI < 0.1 {
		t.Errorf("kept schema, open categories: a new depot on a quarter of rows is not seen as drift: %+v", d)
	}
	closedPath := write(t, dir, "closed.yaml", strings.Replace(written, "    closed: false", "    closed: true", 1))
	if closed := run(closedPath); !unseen(closed) || closed.DataQuality.OK {
		t.Errorf("closed categories: a new depot is no quality finding: %+v", closed.DataQuality.Findings)
	}
}
