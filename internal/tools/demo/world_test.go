package demo

import (
	"bytes"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"

	"plumbline.dev/plumbline/internal/contract/checkreport"
	"plumbline.dev/plumbline/internal/tools/datacheck"
	"plumbline.dev/plumbline/internal/tools/stats"
)

func aucOf(m *Model, ps []Parcel) float64 {
	label := make([]uint8, len(ps))
	score := make([]float64, len(ps))
	for i, p := range ps {
		if p.Late {
			label[i] = 1
		}
		score[i] = m.Score(p)
	}
	return stats.ROCAUC(label, score, stats.Order(score), nil).V
}

// demoLine is the demo's ModelLine as rendered for a run.
func demoLine(t *testing.T) *unstructured.Unstructured {
	t.Helper()
	d := &player{models: "/m", worldPath: "/w.json"}
	objs, err := d.objects()
	if err != nil {
		t.Fatal(err)
	}
	for _, o := range objs {
		if o.GetKind() == "ModelLine" {
			return o
		}
	}
	t.Fatal("no ModelLine in the demo manifests")
	return nil
}

func number(t *testing.T, o *unstructured.Unstructured, path ...string) float64 {
	t.Helper()
	var cur any = o.Object
	for _, p := range path {
		switch c := cur.(type) {
		case map[string]any:
			cur = c[p]
		case []any:
			cur = c[0].(map[string]any)[p]
		}
	}
	switch v := cur.(type) {
	case float64:
		return v
	case int64:
		return float64(v)
	}
	t.Fatalf("%v is %T, not a number", path, cur)
	return 0
}

// The story the demo tells holds for the synthetic world, with margins,
// against the thresholds of the demo's own line: the live model is fine at
// first and falls below the trigger when Fenwick opens (the demo waits out
// its probation first, so the guard only reports it), a model trained after Fenwick opened is above the trigger again
// and falls in the peak, a model trained in the peak passes the gate's
// minimum and falls below the guard once the peak is over.
func TestStoryModels(t *testing.T) {
	line := demoLine(t)
	trigger := number(t, line, "spec", "triggers", "below")
	guard := number(t, line, "spec", "guard", "below")
	minimum := number(t, line, "spec", "gate", "criteria", "minimum")
	t0 := time.Date(2026, 12, 1, 9, 0, 0, 0, time.UTC)
	at := func(s int) time.Time { return t0.Add(time.Duration(s) * time.Second) }
	w := &World{Seed: 11, Phases: []Phase{{At: at(0)}, {At: at(60), Fenwick: true, FeedBroken: true}, {At: at(90), Fenwick: true},
		{At: at(180), Fenwick: true, Peak: true}, {At: at(240), Fenwick: true}}}
	train := func(from, to int, seed uint64) *Model {
		m, err := TrainModel(w.Sample(at(from), at(to), 10000, seed))
		if err != nil {
			t.Fatal(err)
		}
		return m
	}
	v0, v1, v2 := train(0, 60, 1), train(75, 105, 2), train(210, 240, 3) // the trainer keeps to the last 30 s
	sample := func(from, to int, seed uint64) []Parcel { return w.Sample(at(from), at(to), 4000, seed) }
	ordinary, fenwick, peak, after := sample(0, 60, 10), sample(90, 180, 12), sample(180, 240, 13), sample(240, 300, 14)
	const margin = 0.02
	checks := []struct {
		what      string
		got       float64
		above     bool
		threshold float64
	}{
		{"v0 on ordinary traffic, above the trigger", aucOf(v0, ordinary), true, trigger + margin},
		{"v0 once Fenwick opens, below the trigger", aucOf(v0, fenwick), false, trigger - margin},
		{"v1 (trained with Fenwick) above the trigger", aucOf(v1, fenwick), true, trigger + margin},
		{"v1 better than v0 after Fenwick (the gate's comparison)", aucOf(v1, fenwick) - aucOf(v0, fenwick), true, margin},
		{"v1 in the peak, below the trigger", aucOf(v1, peak), false, trigger - margin},
		{"v2 (trained in the peak) on the peak, above the gate's minimum", aucOf(v2, peak), true, minimum + margin},
		{"v2 better than v1 in the peak (the gate's comparison)", aucOf(v2, peak) - aucOf(v1, peak), true, margin},
		{"v2 after the peak, below the guard", aucOf(v2, after), false, guard - margin},
		{"v1 after the peak, above the trigger", aucOf(v1, after), true, trigger + margin},
	}
	for _, c := range checks {
		if c.above && c.got < c.threshold || !c.above && c.got > c.threshold {
			t.Errorf("%s: %.3f against %.3f", c.what, c.got, c.threshold)
		}
	}
}

// The Jobs' programs: train writes an artifact for the data window, score
// writes both models' predictions on a golden set.
func TestTrainAndScore(t *testing.T) {
	dir := t.TempDir()
	now := time.Now()
	w := &World{Seed: 3, Phases: []Phase{{At: now.Add(-2 * time.Minute), Note: "ordinary"}}}
	world := filepath.Join(dir, "world.json")
	if err := w.Save(world); err != nil {
		t.Fatal(err)
	}
	uri := "file://" + filepath.Join(dir, "models", "v1.json")
	t.Setenv("PLUMBLINE_ARTIFACT_URI", uri)
	t.Setenv("PLUMBLINE_VERSION", "late-risk-v1")
	t.Setenv("PLUMBLINE_DATA_FROM", now.Add(-90*time.Second).UTC().Format(time.RFC3339))
	t.Setenv("PLUMBLINE_DATA_TO", now.UTC().Format(time.RFC3339))
	var out bytes.Buffer
	if err := Train([]string{"--world", world, "--recent", "30s"}, &out, &out); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(out.String(), "on 4500 synthetic parcels") {
		t.Errorf("30 s at 150 parcels/s is 4,500 parcels: %s", out.String())
	}
	m, err := ReadArtifact(uri)
	if err != nil {
		t.Fatal(err)
	}
	if m.Rows != 4500 || len(m.Depots) != 3 {
		t.Errorf("model of %d rows over depots %v, want 4500 over the three old depots", m.Rows, m.Depots)
	}

	t.Setenv("PLUMBLINE_CANDIDATE_URI", uri)
	t.Setenv("PLUMBLINE_BASELINE_URI", uri)
	pred := filepath.Join(dir, "predictions.csv")
	if err := Score([]string{"--world", world, "--rows", "200", "--out", pred}, &out, &out); err != nil {
		t.Fatal(err)
	}
	b, err := os.ReadFile(pred)
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSpace(string(b)), "\n")
	if lines[0] != "parcel_id,depot,was_late,candidate_score,baseline_score" || len(lines) != 201 {
		t.Errorf("predictions: header %q and %d rows, want 200", lines[0], len(lines)-1)
	}

	// The check Job's export: the reference is what the imported model
	// learned from when no window is recorded.
	refCSV, curCSV := filepath.Join(dir, "reference.csv"), filepath.Join(dir, "current.csv")
	if err := Extract([]string{"--world", world, "--recent", "30s", "--reference", refCSV, "--current", curCSV}, &out, &out); err != nil {
		t.Fatal(err)
	}
	for _, f := range []string{refCSV, curCSV} {
		b, err := os.ReadFile(f)
		if err != nil {
			t.Fatal(err)
		}
		if !strings.HasPrefix(string(b), "parcel_id,depot,distance_km,weight_kg,address_confidence\n") || strings.Count(string(b), "\n") < 500 {
			t.Errorf("%s: want a header and at least 500 parcels", f)
		}
	}

	t.Setenv("PLUMBLINE_DATA_FROM", "yesterday")
	if err := Train([]string{"--world", world}, &out, &out); err == nil || !strings.Contains(err.Error(), "PLUMBLINE_DATA_FROM") {
		t.Errorf("a bad window start: %v, want an error naming PLUMBLINE_DATA_FROM", err)
	}
	t.Setenv("PLUMBLINE_CANDIDATE_URI", "s3://bucket/model")
	if err := Score([]string{"--world", world, "--out", pred}, &out, &out); err == nil || !strings.Contains(err.Error(), "file://") {
		t.Errorf("a non-file artifact: %v, want an error saying the demo stores models at file:// URIs", err)
	}
}

// The check Job's verdicts in the story, from plumbline datacheck on the
// exported batches: the broken feed is a data-quality failure, the same
// data once backfilled is not, and Fenwick's parcels and the peak's are
// drift against what the models learned from.
func TestStoryChecks(t *testing.T) {
	dir := t.TempDir()
	t0 := time.Date(2026, 12, 1, 9, 0, 0, 0, time.UTC)
	at := func(s int) time.Time { return t0.Add(time.Duration(s) * time.Second) }
	broken := Phase{At: at(60), Fenwick: true, FeedBroken: true}
	w := &World{Seed: 5, Phases: []Phase{{At: at(0)}, broken, {At: at(120), Fenwick: true}, {At: at(180), Fenwick: true, Peak: true}}}
	check := func(name string, refFrom, refTo, from, to int) checkreport.Report {
		t.Helper()
		refCSV, curCSV := filepath.Join(dir, name+"-ref.csv"), filepath.Join(dir, name+"-cur.csv")
		if err := writeBatch(refCSV, w.Sample(at(refFrom), at(refTo), 4500, 1)); err != nil {
			t.Fatal(err)
		}
		if err := writeBatch(curCSV, w.Sample(at(from), at(to), 4500, 2)); err != nil {
			t.Fatal(err)
		}
		term := filepath.Join(dir, name+".termination")
		var out bytes.Buffer
		if err := datacheck.Command([]string{"--reference", refCSV, "--current", curCSV, "--id", "parcel_id", "--psi-threshold", "0.25",
			"--termination-file", term}, &out, &out); err != nil {
			t.Fatalf("%s: %v\n%s", name, err, out.String())
		}
		var report checkreport.Report
		b, err := os.ReadFile(term)
		if err != nil || json.Unmarshal(b, &report) != nil {
			t.Fatalf("%s: no compact report: %v %s", name, err, b)
		}
		return report
	}
	for _, c := range []struct {
		name                         string
		refFrom, refTo, from, to     int
		backfilled, qualityOK, drift bool
	}{
		{"feed broken", 0, 60, 90, 120, false, false, true},
		{"feed backfilled", 0, 60, 90, 120, true, true, true},
		{"peak against Fenwick", 120, 150, 180, 210, true, true, true},
		{"no change", 120, 150, 150, 180, true, true, false},
	} {
		w.Phases[1].Backfilled = c.backfilled
		r := check(strings.ReplaceAll(c.name, " ", "-"), c.refFrom, c.refTo, c.from, c.to)
		if r.DataQuality.OK != c.qualityOK || r.Drift.Detected != c.drift {
			t.Errorf("%s: data quality ok %v, drift %v; want %v and %v (%+v)", c.name, r.DataQuality.OK, r.Drift.Detected, c.qualityOK, c.drift, r)
		}
	}
}

func TestReadArtifactRefusesBadModels(t *testing.T) {
	dir := t.TempDir()
	for name, body := range map[string]string{
		"schema":  `{"schema":"other","kind":"logistic"}`,
		"kind":    `{"schema":"` + ArtifactSchema + `","kind":"forest"}`,
		"weights": `{"schema":"` + ArtifactSchema + `","kind":"logistic","depots":["a"],"weights":[1,2]}`,
		"json":    `{`,
	} {
		path := filepath.Join(dir, name+".json")
		if err := os.WriteFile(path, []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
		if _, err := ReadArtifact("file://" + path); err == nil {
			t.Errorf("%s: a bad model was accepted", name)
		}
	}
}

func TestExpand(t *testing.T) {
	env := map[string]string{"A": "x", "B_2": "y"}
	for in, want := range map[string]string{
		"--a=$(A)":      "--a=x",
		"$(A)$(B_2)":    "xy",
		"$(MISSING) $A": "$(MISSING) $A",
		"no references": "no references",
	} {
		if got := expand(in, env); got != want {
			t.Errorf("expand(%q) = %q, want %q", in, got, want)
		}
	}
}
