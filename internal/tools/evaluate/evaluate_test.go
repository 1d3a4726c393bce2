package evaluate

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/parquet-go/parquet-go"

	"plumbline.dev/plumbline/internal/contract/gatereport"
)

func file(t *testing.T, name, content string) string {
	t.Helper()
	p := filepath.Join(t.TempDir(), name)
	if err := os.WriteFile(p, []byte(content), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// run runs the command and returns the full report and the gate report.
func run(t *testing.T, args []string, env map[string]string) (Report, *gatereport.Report, string) {
	t.Helper()
	dir := t.TempDir()
	out, term := filepath.Join(dir, "full.json"), filepath.Join(dir, "term")
	args = append(args, "--out", out, "--termination-file", term)
	var stdout, stderr bytes.Buffer
	if err := Command(args, func(k string) string { return env[k] }, &stdout, &stderr); err != nil {
		t.Fatalf("evaluate %v: %v\n%s", args, err, stderr.String())
	}
	var full Report
	b, err := os.ReadFile(out)
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &full); err != nil {
		t.Fatal(err)
	}
	raw, err := os.ReadFile(term)
	if err != nil {
		t.Fatal(err)
	}
	if len(raw) > gatereport.MaxBytes {
		t.Fatalf("gate report of %d bytes", len(raw))
	}
	gr, err := gatereport.Parse(raw)
	if err != nil {
		t.Fatalf("the gate report does not parse: %v\n%s", err, raw)
	}
	return full, gr, stdout.String()
}

func metric(t *testing.T, r Report, segment, name string) MetricReport {
	t.Helper()
	for _, g := range r.Groups {
		if g.Segment != segment {
			continue
		}
		for _, m := range g.Metrics {
			if m.Metric == name {
				return m
			}
		}
	}
	t.Fatalf("no %s for segment %q", name, segment)
	return MetricReport{}
}

func near(t *testing.T, what string, got *float64, want, tol float64) {
	t.Helper()
	if got == nil || math.Abs(*got-want) > tol {
		v := "null"
		if got != nil {
			v = fmt.Sprint(*got)
		}
		t.Errorf("%s = %s, want %v", what, v, want)
	}
}

// McNemar through the whole tool: rows built to the table of R's
// mcnemar.test example (values reproduced in statsmodels' nonparametric
// tests): [[101,121],[59,33]] gives b=121, c=59, chi-square with continuity
// correction 20.67222, p=5.450095e-06.
func TestMcNemarThroughTheTool(t *testing.T) {
	var b strings.Builder
	b.WriteString("label,candidate,baseline\n")
	add := func(n int, cand, base int) {
		for i := 0; i < n; i++ {
			// label 1; a model is right when it predicts 1
			fmt.Fprintf(&b, "1,%d,%d\n", cand, base)
		}
	}
	add(101, 1, 1) // both right
	add(121, 1, 0) // only the candidate
	add(59, 0, 1)  // only the baseline
	add(33, 0, 0)  // neither
	full, _, _ := run(t, []string{"--input", file(t, "m.csv", b.String()), "--label", "label", "--candidate", "candidate", "--baseline", "baseline", "--resamples", "200"}, nil)
	acc := metric(t, full, "", "accuracy")
	mc := acc.PairedTests.McNemar
	if mc == nil || mc.B != 121 || mc.C != 59 || mc.Exact || math.Abs(mc.Statistic-20.67222) > 1e-5 || math.Abs(mc.PValue-5.450095e-06) > 1e-11 {
		t.Errorf("McNemar %+v", mc)
	}
	if acc.Test != "mcnemar" || *acc.PValue != mc.PValue {
		t.Errorf("accuracy's test %s p %v", acc.Test, *acc.PValue)
	}
	near(t, "candidate accuracy", acc.Candidate, 222.0/314, 1e-12)
	near(t, "baseline accuracy", acc.Baseline, 160.0/314, 1e-12)
	// Wilson intervals of each accuracy (checked against the function,
	// which is checked against R's binom).
	if acc.CandidateInterval == nil || acc.CandidateInterval[0] > 222.0/314 || acc.CandidateInterval[1] < 222.0/314 {
		t.Errorf("Wilson interval %v", acc.CandidateInterval)
	}
}

// DeLong through the tool, on the data derived by hand from DeLong, DeLong
// and Clarke-Pearson (1988): z = 1/sqrt(77), p = 0.9093.
func TestDeLongThroughTheTool(t *testing.T) {
	csv := "y,a,b\n0,.2,.2\n0,.3,.4\n0,.4,.3\n1,.5,.2\n1,.2,.5\n1,.9,.4\n"
	full, _, _ := run(t, []string{"--input", file(t, "d.csv", csv), "--label", "y", "--candidate", "a", "--baseline", "b", "--resamples", "200"}, nil)
	auc := metric(t, full, "", "roc_auc")
	d := auc.PairedTests.DeLong
	if d == nil || d.Z == nil || math.Abs(*d.Z-1/math.Sqrt(77)) > 1e-9 || math.Abs(d.PValue-0.9093) > 1e-4 {
		t.Fatalf("DeLong %+v", d)
	}
	near(t, "AUC candidate", auc.Candidate, 13.0/18, 1e-12)
	near(t, "delta", auc.Delta, 1.0/18, 1e-12)
	// DeLong's interval: delta ± 1.96 sqrt(77)/18.
	near(t, "low", auc.DeltaLow, 1.0/18-1.959963984540054*math.Sqrt(77)/18, 1e-9)
}

// Regression metrics through the tool: scikit-learn documentation's
// r2_score and mean_squared_error examples (y=[3,-0.5,2,7],
// pred=[2.5,0,2,8]: R2 0.9486081370449679, RMSE 0.6123724356957945).
func TestRegressionThroughTheTool(t *testing.T) {
	csv := "y,cand,base\n3,2.5,3\n-0.5,0,-0.5\n2,2,2\n7,8,7\n"
	full, gr, _ := run(t, []string{"--input", file(t, "r.csv", csv), "--task", "regression", "--label", "y", "--candidate", "cand", "--baseline", "base", "--resamples", "200"}, nil)
	near(t, "R2", metric(t, full, "", "r2").Candidate, 0.9486081370449679, 1e-12)
	near(t, "RMSE", metric(t, full, "", "rmse").Candidate, 0.6123724356957945, 1e-12)
	near(t, "MAE", metric(t, full, "", "mae").Candidate, 0.5, 1e-12)
	if metric(t, full, "", "rmse").Better != "Lower" {
		t.Error("rmse: lower is better")
	}
	if len(gr.Metrics) != 3 || gr.Metrics[0].Metric != "mae" {
		t.Errorf("gate report metrics %+v", gr.Metrics)
	}
}

// Multiclass through the tool: scikit-learn documentation's f1_score
// example (y=[0,1,2,0,1,2], pred=[0,2,1,0,0,1]: macro F1 0.2667, micro
// 0.3333).
func TestMulticlassThroughTheTool(t *testing.T) {
	csv := "y,cand,base\nred,red,red\ngreen,blue,green\nblue,green,blue\nred,red,red\ngreen,red,green\nblue,green,blue\n"
	full, _, _ := run(t, []string{"--input", file(t, "c.csv", csv), "--task", "multiclass", "--label", "y", "--candidate", "cand", "--baseline", "base", "--resamples", "200"}, nil)
	near(t, "macro F1", metric(t, full, "", "f1_macro").Candidate, 0.2667, 1e-4)
	near(t, "micro F1", metric(t, full, "", "f1_micro").Candidate, 0.3333, 1e-4)
	near(t, "baseline accuracy", metric(t, full, "", "accuracy").Baseline, 1, 0)
	if len(full.Classes) != 3 {
		t.Errorf("classes %v", full.Classes)
	}
}

// goldenCSV is a synthetic Larkspur golden set: labels, two scores, depots,
// must-pass flags and ids.
func goldenCSV(rows int, depots []string) string {
	var b strings.Builder
	b.WriteString("parcel_id,depot,was_late,candidate_score,baseline_score,must_pass\n")
	x := uint64(7)
	next := func() float64 { // a small deterministic generator
		x ^= x << 13
		x ^= x >> 7
		x ^= x << 17
		return float64(x%1_000_000) / 1_000_000
	}
	for i := 0; i < rows; i++ {
		y := 0
		if next() < 0.3 {
			y = 1
		}
		noise := next()
		c := 0.3*noise + 0.55*float64(y) + 0.1
		bs := 0.5*next() + 0.35*float64(y) + 0.1
		fmt.Fprintf(&b, "LK-%05d,%s,%d,%.4f,%.4f,%d\n", i, depots[i%len(depots)], y, c, bs, boolInt(i%97 == 0))
	}
	return b.String()
}

func boolInt(b bool) int {
	if b {
		return 1
	}
	return 0
}

func TestSegmentsHolmAndMustPass(t *testing.T) {
	depots := []string{"north", "harbour", "fenwick"}
	full, gr, out := run(t, []string{"--input", file(t, "g.csv", goldenCSV(3000, depots)), "--label", "was_late", "--candidate", "candidate_score",
		"--baseline", "baseline_score", "--segment", "depot", "--must-pass", "must_pass", "--id", "parcel_id", "--resamples", "300",
		"--max-regression", "0.01", "--report-metrics", "roc_auc,recall"}, nil)
	if len(full.Groups) != 4 || full.Groups[0].Segment != "" || full.Groups[1].Segment != "fenwick" {
		t.Fatalf("groups %+v", full.Groups)
	}
	// Holm: the adjusted p-values are at least the raw ones, and for the
	// smallest of three equal the raw one times three (capped at 1).
	var ps, adj []float64
	for _, g := range full.Groups[1:] {
		m := metric(t, full, g.Segment, "recall")
		ps = append(ps, *m.PValue)
		adj = append(adj, *m.PValueAdjusted)
	}
	minI := 0
	for i := range ps {
		if ps[i] < ps[minI] {
			minI = i
		}
		if adj[i] < ps[i] {
			t.Errorf("adjusted p %v below raw %v", adj[i], ps[i])
		}
	}
	if math.Abs(adj[minI]-math.Min(1, 3*ps[minI])) > 1e-12 {
		t.Errorf("Holm: smallest p %v adjusted to %v", ps[minI], adj[minI])
	}
	if !strings.Contains(full.MultipleTesting, "Holm") {
		t.Errorf("the report does not state its correction: %q", full.MultipleTesting)
	}
	// Must-pass rows: every 97th row; the candidate's failures by id.
	if full.MustPass.Total != 31 || gr.MustPass.Total != 31 || gr.MustPass.Failed != int64(full.MustPass.Failed) {
		t.Errorf("must-pass %+v / %+v", full.MustPass, gr.MustPass)
	}
	for _, id := range full.MustPass.FailedIDs {
		if !strings.HasPrefix(id, "LK-") {
			t.Errorf("failure named %q", id)
		}
	}
	// Non-inferiority at 0.01, for a clearly better candidate.
	if m := metric(t, full, "", "roc_auc"); m.NonInferior == nil || !*m.NonInferior {
		t.Errorf("roc_auc non-inferiority %v", m.NonInferior)
	}
	// The gate report: whole set first, then segments.
	if gr.Metrics[0].Segment != "" || gr.Metrics[len(gr.Metrics)-1].Segment == "" || gr.Truncated {
		t.Errorf("gate report order or truncation: %+v", gr.Metrics)
	}
	if !strings.Contains(out, "harbour") || !strings.Contains(out, "must-pass rows:") {
		t.Errorf("table:\n%s", out)
	}
}

// Too many rows for a termination message: segment rows go first, and the
// report says it was truncated.
func TestGateReportTruncation(t *testing.T) {
	var depots []string
	for i := 0; i < 12; i++ {
		depots = append(depots, fmt.Sprintf("depot-%02d", i))
	}
	_, gr, out := run(t, []string{"--input", file(t, "g.csv", goldenCSV(2400, depots)), "--label", "was_late", "--candidate", "candidate_score",
		"--baseline", "baseline_score", "--segment", "depot", "--resamples", "100"}, nil)
	if !gr.Truncated {
		t.Fatal("not truncated")
	}
	whole := 0
	for _, m := range gr.Metrics {
		if m.Segment == "" {
			whole++
		}
	}
	if whole != len(defaultReportMetrics[Binary]) {
		t.Errorf("%d whole-set rows kept, want all %d", whole, len(defaultReportMetrics[Binary]))
	}
	if !strings.Contains(out, "truncated") {
		t.Errorf("stdout does not say truncated:\n%s", out)
	}
}

// The controller's environment picks the gate report's metrics, segments
// and confidence.
func TestGateEnvironment(t *testing.T) {
	env := map[string]string{EnvGateMetrics: "roc_auc,recall", EnvGateSegments: "harbour", EnvGateConfidence: "0.99"}
	full, gr, _ := run(t, []string{"--input", file(t, "g.csv", goldenCSV(900, []string{"north", "harbour"})), "--label", "was_late",
		"--candidate", "candidate_score", "--baseline", "baseline_score", "--segment", "depot", "--resamples", "100"}, env)
	if full.Confidence != 0.99 {
		t.Errorf("confidence %v", full.Confidence)
	}
	if len(gr.Metrics) != 4 {
		t.Fatalf("gate rows %+v", gr.Metrics)
	}
	for _, m := range gr.Metrics {
		if (m.Metric != "roc_auc" && m.Metric != "recall") || (m.Segment != "" && m.Segment != "harbour") || *m.Confidence != 0.99 {
			t.Errorf("row %+v", m)
		}
	}
	env[EnvGateSegments] = "none"
	_, gr, _ = run(t, []string{"--input", file(t, "g.csv", goldenCSV(900, []string{"north", "harbour"})), "--label", "was_late",
		"--candidate", "candidate_score", "--baseline", "baseline_score", "--segment", "depot", "--resamples", "100"}, env)
	if len(gr.Metrics) != 2 {
		t.Errorf("segments none: %+v", gr.Metrics)
	}
}

// A segment with one class leaves ROC AUC undefined, with the reason, in
// both reports.
func TestUndefinedMetric(t *testing.T) {
	csv := "depot,y,c,b\nnorth,1,0.9,0.8\nnorth,1,0.7,0.6\nnorth,0,0.2,0.3\nnorth,0,0.4,0.1\nharbour,1,0.8,0.7\nharbour,1,0.6,0.9\n"
	full, gr, out := run(t, []string{"--input", file(t, "u.csv", csv), "--label", "y", "--candidate", "c", "--baseline", "b", "--segment", "depot",
		"--resamples", "100", "--report-metrics", "roc_auc"}, nil)
	m := metric(t, full, "harbour", "roc_auc")
	if m.Candidate != nil || m.Undefined != "no negative labels" {
		t.Errorf("harbour AUC %+v", m)
	}
	found := false
	for _, g := range gr.Metrics {
		if g.Segment == "harbour" {
			found = g.Candidate == nil && g.Undefined == "no negative labels"
		}
	}
	if !found {
		t.Errorf("gate report %+v", gr.Metrics)
	}
	if !strings.Contains(out, "harbour/roc_auc: no negative labels") {
		t.Errorf("table:\n%s", out)
	}
}

// The same rows as CSV, JSON Lines and Parquet give the same numbers.
func TestFormatsAgree(t *testing.T) {
	rows := []struct {
		Y    int64   `parquet:"y" json:"y"`
		C    float64 `parquet:"c" json:"c"`
		B    float64 `parquet:"b" json:"b"`
		Seg  string  `parquet:"seg" json:"seg"`
		Pass bool    `parquet:"pass" json:"pass"`
	}{{1, 0.9, 0.6, "a", true}, {0, 0.2, 0.5, "a", false}, {1, 0.4, 0.7, "b", true}, {0, 0.3, 0.2, "b", false}, {0, 0.6, 0.1, "a", false}, {1, 0.8, 0.4, "b", false}}
	var csv, jsonl strings.Builder
	csv.WriteString("y,c,b,seg,pass\n")
	for _, r := range rows {
		fmt.Fprintf(&csv, "%d,%v,%v,%s,%v\n", r.Y, r.C, r.B, r.Seg, r.Pass)
		j, _ := json.Marshal(r)
		jsonl.Write(j)
		jsonl.WriteByte('\n')
	}
	pq := filepath.Join(t.TempDir(), "g.parquet")
	f, err := os.Create(pq)
	if err != nil {
		t.Fatal(err)
	}
	w := parquet.NewGenericWriter[struct {
		Y    int64   `parquet:"y" json:"y"`
		C    float64 `parquet:"c" json:"c"`
		B    float64 `parquet:"b" json:"b"`
		Seg  string  `parquet:"seg" json:"seg"`
		Pass bool    `parquet:"pass" json:"pass"`
	}](f)
	if _, err := w.Write(rows); err != nil {
		t.Fatal(err)
	}
	w.Close()
	f.Close()
	args := func(p string) []string {
		return []string{"--input", p, "--label", "y", "--candidate", "c", "--baseline", "b", "--segment", "seg", "--must-pass", "pass", "--resamples", "100"}
	}
	a, _, _ := run(t, args(file(t, "g.csv", csv.String())), nil)
	j, _, _ := run(t, args(file(t, "g.jsonl", jsonl.String())), nil)
	p, _, _ := run(t, args(pq), nil)
	for _, other := range []Report{j, p} {
		for _, name := range []string{"accuracy", "roc_auc", "log_loss"} {
			for _, seg := range []string{"", "a", "b"} {
				x, y := metric(t, a, seg, name), metric(t, other, seg, name)
				str := func(m MetricReport) string {
					s := ""
					for _, p := range []*float64{m.Candidate, m.Baseline, m.DeltaLow} {
						if p == nil {
							s += " nil"
						} else {
							s += fmt.Sprint(" ", *p)
						}
					}
					return s
				}
				if str(x) != str(y) {
					t.Errorf("%s/%s differs between formats", seg, name)
				}
			}
		}
		if other.MustPass.Total != 2 || a.MustPass.Total != 2 {
			t.Errorf("must-pass %d / %d", a.MustPass.Total, other.MustPass.Total)
		}
	}
}

func TestBadInputNamesFileLineColumn(t *testing.T) {
	good := "id,y,c,b\nx,1,0.9,0.1\n"
	cases := []struct {
		name, content string
		args          []string
		want          string
	}{
		{"score not a number", "id,y,c,b\nx,1,0.9,0.1\ny,0,high,0.2\n", nil, `b.csv:3: column "c" (--candidate): want a score (a number) or a class like the label's, got "high"`},
		{"label not binary", "id,y,c,b\nx,1,0.9,0.1\ny,2,0.8,0.2\n", nil, `b.csv:3: column "y" (--label): want 1 or 0`},
		{"missing column", good, []string{"--baseline", "base"}, `no column "base" (--baseline); the columns are: id, y, c, b`},
		{"third class", "id,y,c,b\nx,late,late,late\ny,on-time,late,late\nz,lost,late,late\n", []string{"--positive", "late"}, `b.csv:4: column "y" (--label): want the positive class "late" or the other class "on-time"`},
		{"regression must-pass", good, []string{"--task", "regression", "--must-pass", "y"}, "need a classification task"},
		{"no rows", "id,y,c,b\n", nil, "no rows"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			args := []string{"--input", file(t, "b.csv", c.content), "--label", "y", "--candidate", "c", "--baseline", "b", "--termination-file", ""}
			args = append(args, c.args...)
			var stdout, stderr bytes.Buffer
			err := Command(args, func(string) string { return "" }, &stdout, &stderr)
			var ie *InputError
			if !errors.As(err, &ie) {
				t.Fatalf("want an input error, got %v", err)
			}
			if !strings.Contains(err.Error(), c.want) {
				t.Errorf("error %q, want %q", err, c.want)
			}
		})
	}
}

// Every usage error, a missing required flag too, is refused before any
// file is read, names the flag, and points at --help; an unknown metric
// for the gate report is one (it used to give an empty report and exit 0).
func TestUsageErrors(t *testing.T) {
	cols := []string{"--label", "late", "--candidate", "c", "--baseline", "b"}
	for _, c := range []struct {
		args []string
		want string
	}{
		{nil, "--input is required"},
		{[]string{"--input", "x.csv"}, "--label is required"},
		{append([]string{"--input", "x.csv", "--confidence", "1"}, cols...), "--confidence 1"},
		{append([]string{"--input", "x.csv", "--task", "ranking"}, cols...), `--task "ranking"`},
		{append([]string{"--input", "x.csv", "--resamples", "10"}, cols...), "--resamples 10"},
		{append([]string{"--input", "x.csv", "--no-such-flag"}, cols...), "flag provided but not defined: -no-such-flag"},
		{append([]string{"--input", "x.csv", "--report-metrics", "roc_auc,auc"}, cols...), `--report-metrics: "auc" is not a binary metric; choose from accuracy,`},
		{append([]string{"--input", "x.csv", "--task", "regression", "--report-metrics", "roc_auc"}, cols...), `"roc_auc" is not a regression metric`},
	} {
		var stdout, stderr bytes.Buffer
		if err := Command(c.args, func(string) string { return "" }, &stdout, &stderr); !errors.Is(err, ErrUsage) {
			t.Errorf("%v: %v, want a usage error", c.args, err)
		}
		if !strings.Contains(stderr.String(), c.want) || !strings.Contains(stderr.String(), "Run 'plumbline evaluate --help' for usage.") {
			t.Errorf("%v: stderr %q lacks %q and the pointer to --help", c.args, stderr.String(), c.want)
		}
	}
}

// The table says which way is better for each metric, and with
// --max-regression the non-inferiority verdict of each difference.
func TestTableShowsBetterAndVerdicts(t *testing.T) {
	var b strings.Builder
	b.WriteString("late,c,b\n")
	for i := range 400 {
		y := i % 2
		c := 0.3 + 0.4*float64(y) + 0.001*float64(i%7)
		fmt.Fprintf(&b, "%d,%.3f,%.3f\n", y, c, 0.35+0.3*float64(y)+0.001*float64(i%5))
	}
	in := file(t, "golden.csv", b.String())
	args := []string{"--input", in, "--label", "late", "--candidate", "c", "--baseline", "b", "--resamples", "200"}
	_, _, plain := run(t, args, nil)
	if !strings.Contains(plain, "BETTER") || strings.Contains(plain, "NON-INFERIOR") {
		t.Errorf("without --max-regression: want a BETTER column and no verdicts:\n%s", plain)
	}
	_, _, out := run(t, append(args, "--max-regression", "0.01"), nil)
	var logLoss, auc string
	for _, l := range strings.Split(out, "\n") {
		f := strings.Fields(l)
		if len(f) < 3 || f[0] != "(all)" {
			continue
		}
		switch f[1] {
		case "log_loss":
			logLoss = l
		case "roc_auc":
			auc = l
		}
	}
	if !strings.Contains(out, "NON-INFERIOR") || !strings.Contains(out, "within 0.01") {
		t.Fatalf("with --max-regression: no verdict column:\n%s", out)
	}
	if f := strings.Fields(logLoss); len(f) < 3 || f[2] != "lower" {
		t.Errorf("log_loss row %q: want BETTER lower", logLoss)
	}
	if f := strings.Fields(auc); len(f) < 3 || f[2] != "higher" || f[len(f)-1] != "yes" {
		t.Errorf("roc_auc row %q: want BETTER higher and a candidate better than live judged non-inferior", auc)
	}
}

// Whatever the golden set, the gate report plumbline evaluate writes is one
// the controller accepts: every delta is candidate - baseline and every
// interval contains it (run parses each report as the controller does).
// Small, noisy, lopsided sets are where resampled intervals are oddest.
func TestGateReportsAreConsistent(t *testing.T) {
	for seed := uint64(1); seed <= 100; seed++ {
		rng := rand.New(rand.NewPCG(seed, 99))
		rows := 12 + rng.IntN(150)
		positives := 0.05 + 0.6*rng.Float64()
		var b strings.Builder
		b.WriteString("id,depot,y,cand,base,value,pred_value,base_value,cls,cand_cls,base_cls\n")
		for i := 0; i < rows; i++ {
			y := 0
			if rng.Float64() < positives {
				y = 1
			}
			c := math.Min(1, math.Max(0, 0.5*float64(y)+rng.NormFloat64()*0.3+0.25))
			bs := math.Round(rng.Float64()*4) / 4 // a coarse, tied baseline
			v := rng.NormFloat64() * 10
			fmt.Fprintf(&b, "r%d,d%d,%d,%.4f,%.2f,%.3f,%.3f,%.3f,%d,%d,%d\n", i, rng.IntN(3), y, c, bs, v, v+rng.NormFloat64(), v+3*rng.NormFloat64(),
				rng.IntN(3), rng.IntN(3), rng.IntN(3))
		}
		in := file(t, "g.csv", b.String())
		common := []string{"--input", in, "--segment", "depot", "--resamples", "200", "--report-segments", "*"}
		run(t, append(common, "--label", "y", "--candidate", "cand", "--baseline", "base",
			"--report-metrics", strings.Join(metricNames[Binary], ",")), nil)
		run(t, append(common, "--task", "regression", "--label", "value", "--candidate", "pred_value", "--baseline", "base_value",
			"--report-metrics", strings.Join(metricNames[Regression], ",")), nil)
		run(t, append(common, "--task", "multiclass", "--label", "cls", "--candidate", "cand_cls", "--baseline", "base_cls",
			"--report-metrics", strings.Join(metricNames[Multiclass], ",")), nil)
	}
}

// One model ranks every pair of a segment right and the other every pair
// wrong: DeLong's variance of the difference is zero and its z infinite.
// The tool still writes its full report (z null, the p-value 0) and a gate
// report the controller accepts.
func TestDeLongPerfectAgainstReversed(t *testing.T) {
	csv := "y,seg,a,b\n0,tiny,.1,.9\n0,tiny,.2,.8\n1,tiny,.8,.2\n1,tiny,.9,.1\n" +
		"0,big,.3,.4\n1,big,.6,.5\n0,big,.5,.3\n1,big,.4,.6\n0,big,.2,.1\n1,big,.7,.8\n"
	full, _, _ := run(t, []string{"--input", file(t, "d.csv", csv), "--label", "y", "--candidate", "a", "--baseline", "b",
		"--segment", "seg", "--resamples", "100"}, nil)
	auc := metric(t, full, "tiny", "roc_auc")
	d := auc.PairedTests.DeLong
	if d == nil || d.Z != nil || d.PValue != 0 || d.AUCCandidate != 1 || d.AUCBaseline != 0 {
		t.Fatalf("DeLong on the tiny segment: %+v", d)
	}
}

// Hard 0/1 predictions in a binary golden set are scored as probabilities
// by log loss and Brier; the report and the table say so.
func TestHardPredictionsWarned(t *testing.T) {
	csv := "y,a,b\n0,0,.2\n1,1,.7\n0,1,.4\n1,1,.9\n0,0,.1\n"
	full, _, out := run(t, []string{"--input", file(t, "h.csv", csv), "--label", "y", "--candidate", "a", "--baseline", "b", "--resamples", "100"}, nil)
	if len(full.Warnings) != 1 || !strings.Contains(full.Warnings[0], "candidate's scores are all 0 or 1") {
		t.Fatalf("warnings %q", full.Warnings)
	}
	if !strings.Contains(out, "warning: the candidate's scores are all 0 or 1") {
		t.Errorf("the table does not warn:\n%s", out)
	}
	// One mistake at certainty: log loss is the clipped -ln(eps)/5, with
	// eps the machine epsilon (scikit-learn's default clipping, from
	// memory): -ln(2.220446049250313e-16) = 36.04365338911715.
	near(t, "log loss of hard predictions", metric(t, full, "", "log_loss").Candidate, 36.04365338911715/5, 1e-9)
}

// A segment too small for a paired bootstrap gets no interval and no
// bootstrap p-value, with the reason, instead of a zero-width interval and
// a non-inferiority verdict from one row.
func TestBootstrapMinimum(t *testing.T) {
	csv := "y,seg,a,b\n1,lone,.9,.2\n"
	for i := 0; i < 30; i++ {
		csv += fmt.Sprintf("%d,many,.%d,.%d\n", i%2, 2+i%2*6, 3+i%2*4)
	}
	full, gr, _ := run(t, []string{"--input", file(t, "m.csv", csv), "--label", "y", "--candidate", "a", "--baseline", "b",
		"--segment", "seg", "--resamples", "100", "--max-regression", "0.05", "--report-metrics", "recall,f1", "--report-segments", "*"}, nil)
	lone := metric(t, full, "lone", "recall")
	if lone.DeltaLow != nil || lone.DeltaHigh != nil || lone.PValue != nil || lone.NonInferior != nil {
		t.Errorf("a 1-row segment: interval [%v, %v], p %v, non-inferior %v; want none", lone.DeltaLow, lone.DeltaHigh, lone.PValue, lone.NonInferior)
	}
	if b := lone.PairedTests.Bootstrap; b == nil || !strings.Contains(b.Undefined, "1 rows: a paired bootstrap interval needs at least 10") {
		t.Errorf("bootstrap %+v: no reason given", b)
	}
	if many := metric(t, full, "many", "recall"); many.DeltaLow == nil || many.PairedTests.Bootstrap.Undefined != "" {
		t.Errorf("30 rows: %+v", many.PairedTests.Bootstrap)
	}
	for _, m := range gr.Metrics {
		if m.Segment == "lone" && (m.DeltaLow != nil || m.PValue != nil) {
			t.Errorf("the gate report claims an interval for the 1-row segment: %+v", m)
		}
	}
}
