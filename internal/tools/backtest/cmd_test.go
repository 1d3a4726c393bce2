package backtest

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

func writeFileT(t *testing.T, dir, name, content string) string {
	t.Helper()
	p := filepath.Join(dir, name)
	if err := os.WriteFile(p, []byte(content), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// historyCSV is ten days at 15-minute steps: 0.85, then 0.74 from day 4
// 06:00; labelled rows grow by 100 a point.
func historyCSV() string {
	var b strings.Builder
	b.WriteString("time,value,labelled_rows\n")
	drop := t0.Add(4*24*time.Hour + 6*time.Hour)
	for i, t := 0, t0; t.Before(t0.Add(10 * 24 * time.Hour)); i, t = i+1, t.Add(15*time.Minute) {
		v := 0.85
		if !t.Before(drop) {
			v = 0.74
		}
		fmt.Fprintf(&b, "%s,%.3f,%d\n", t.Format(time.RFC3339), v, 100*i)
	}
	return b.String()
}

const lineYAML = `apiVersion: plumbline.dev/v1alpha1
kind: ModelLine
metadata: {name: late-risk, namespace: larkspur}
spec:
  serving: {deploymentName: late-risk-scorer, containerName: scorer}
  schedule: {cron: "30 2 * * 1", timeZone: Europe/London}
  triggers:
    - {name: auc-drop, query: "x", below: 0.78, forSeconds: 7200, everySeconds: 900}
    - {name: late-share, query: "y", above: 0.12, forSeconds: 7200, everySeconds: 900}
  cooldownSeconds: 43200
  checks:
    freshData: {query: "z", atLeast: 2000}
`

func TestCommandEndToEnd(t *testing.T) {
	dir := t.TempDir()
	hist := writeFileT(t, dir, "history.csv", historyCSV())
	line := writeFileT(t, dir, "line.yaml", lineYAML)
	out, svg, png := filepath.Join(dir, "report.json"), filepath.Join(dir, "chart.svg"), filepath.Join(dir, "chart.png")
	var stdout, stderr bytes.Buffer
	err := Command(context.Background(), []string{"--history", hist, "--line", line, "--line-triggers", "auc-drop",
		"--schedule", "0 3 1 * *", "--trigger", "below=0.80,for=1h,every=15m", "--out", out, "--chart", svg}, &stdout, &stderr)
	if err != nil {
		t.Fatalf("%v\n%s", err, stderr.String())
	}
	s := stdout.String()
	for _, want := range []string{"target 0.78 from the line's trigger auc-drop", "POLICY", "line late-risk", `cron "0 3 1 * *"`,
		"trigger below=0.80,for=1h,every=15m", "recommended: trigger below=0.80,for=1h,every=15m", "chart of"} {
		if !strings.Contains(s, want) {
			t.Errorf("output lacks %q:\n%s", want, s)
		}
	}
	raw, _ := os.ReadFile(out)
	var rep Report
	if err := json.Unmarshal(raw, &rep); err != nil || rep.Schema != ReportSchema || len(rep.Results) != 4 {
		t.Fatalf("report: %v %+v", err, rep)
	}
	// The 1-hour trigger at 0.80 fires one window after the drop; the
	// line's own trigger (0.78 for 2 h) two hours after.
	drop := t0.Add(4*24*time.Hour + 6*time.Hour)
	for _, r := range rep.Results {
		switch r.Policy {
		case "trigger below=0.80,for=1h,every=15m":
			if len(r.Retrains) != 1 || !r.Retrains[0].Start.Equal(drop.Add(time.Hour)) {
				t.Errorf("%s: retrains %+v", r.Policy, r.Retrains)
			}
		case "line late-risk":
			// Monday 01:30 UTC is refused: 600 labelled rows since the
			// start, below the line's 2,000. The trigger then fires two
			// hours after the drop, and the next Monday's start runs.
			if r.Decisions["InsufficientData"] != 1 || len(r.Retrains) != 2 ||
				r.Retrains[0].Reason != "Trigger/auc-drop" || !r.Retrains[0].Start.Equal(drop.Add(2*time.Hour)) ||
				r.Retrains[1].Reason != "Schedule" || !r.Retrains[1].Start.Equal(t0.Add(7*24*time.Hour+90*time.Minute)) {
				t.Errorf("%s: decisions %v retrains %+v", r.Policy, r.Decisions, r.Retrains)
			}
		}
	}
	if b, _ := os.ReadFile(svg); !bytes.Contains(b, []byte("<svg")) {
		t.Error("the chart is not an SVG")
	}
	if err := Command(context.Background(), []string{"--history", hist, "--target", "0.8", "--schedule", "@daily", "--chart", png, "--chart-policy", "none"}, io.Discard, io.Discard); err != nil {
		t.Fatal(err)
	}
	if b, _ := os.ReadFile(png); !bytes.HasPrefix(b, []byte("\x89PNG")) {
		t.Error("the chart is not a PNG")
	}
}

// With costs, the cheapest policy is recommended, and the reason says so.
func TestCostRecommendation(t *testing.T) {
	dir := t.TempDir()
	hist := writeFileT(t, dir, "history.csv", historyCSV())
	var stdout bytes.Buffer
	// Retrains cost more than 10 days below target: not retraining wins.
	err := Command(context.Background(), []string{"--history", hist, "--target", "0.8", "--trigger", "below=0.80,for=1h,every=15m",
		"--cost-retrain", "100000", "--cost-hour-below", "1"}, &stdout, io.Discard)
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(stdout.String(), "recommended: none\n  because the lowest estimated cost") {
		t.Errorf("output:\n%s", stdout.String())
	}
	stdout.Reset()
	err = Command(context.Background(), []string{"--history", hist, "--target", "0.8", "--trigger", "below=0.80,for=1h,every=15m",
		"--cost-retrain", "10", "--cost-hour-below", "5"}, &stdout, io.Discard)
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(stdout.String(), "recommended: trigger below=0.80,for=1h,every=15m") {
		t.Errorf("output:\n%s", stdout.String())
	}
}

func TestCommandErrors(t *testing.T) {
	dir := t.TempDir()
	hist := writeFileT(t, dir, "history.csv", historyCSV())
	line := writeFileT(t, dir, "line.yaml", lineYAML)
	usage := [][]string{
		{"--history", hist},
		{"--history", hist, "--schedule", "@daily"},
		{"--history", hist, "--target", "0.8", "--schedule", "every monday"},
		{"--history", hist, "--target", "0.8", "--trigger", "below=0.8,for=5m,every=1h"},
		{"--history", hist, "--target", "0.8", "--trigger", "under=0.8"},
		{"--history", hist, "--target", "0.8", "--cusum", "k=0.01"},
		{"--history", hist, "--prometheus-url", "http://x", "--target", "0.8", "--schedule", "@daily"},
		{"--target", "0.8", "--schedule", "@daily", "--prometheus-url", "http://x"},
		{"staleness", "--history", hist, "--trained-at", "yesterday", "--target", "0.8"},
	}
	for _, args := range usage {
		var stderr bytes.Buffer
		if err := Command(context.Background(), args, io.Discard, &stderr); !errors.Is(err, ErrUsage) || stderr.Len() == 0 {
			t.Errorf("%v: %v (stderr %q), want a usage error explained", args, err, stderr.String())
		}
	}
	// Errors name the flag as typed, and are found before any file is
	// read: a missing history, a chart that cannot be drawn.
	missing := filepath.Join(dir, "no-such-history.csv")
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"--history", hist, "--target", "0.8", "--schedule", "61 * * * *"}, `error: --schedule "61 * * * *": end of range (61) above maximum (59)`},
		{[]string{"--target", "0.8", "--schedule", "@daily"}, "error: --history is required"},
		{[]string{"--history", missing, "--target", "0.8", "--schedule", "@daily", "--chart", "drops.gif"}, "error: --chart drops.gif: name an .svg or .png file"},
		{[]string{"staleness", "--history", missing, "--trained-at", "2026-10-01T00:00:00Z", "--target", "0.8", "--chart", "decay.pdf"}, "error: --chart decay.pdf"},
	} {
		var stderr bytes.Buffer
		err := Command(context.Background(), c.args, io.Discard, &stderr)
		if !errors.Is(err, ErrUsage) || !strings.Contains(stderr.String(), c.want) || strings.Contains(stderr.String(), "spec.") {
			t.Errorf("%v: %v, stderr %q; want a usage error with %q", c.args, err, stderr.String(), c.want)
		}
	}
	bad := map[string]string{
		"time,value\n2026-09-07T00:00:00Z,0.8\n2026-09-06T00:00:00Z,0.8\n": "is not after the row before",
		"time,value\nMonday,0.8\n2026-09-08T00:00:00Z,0.8\n":               "column time",
		"time,value\n2026-09-07T00:00:00Z,good\n":                          "column value",
		"when,auc\n2026-09-07T00:00:00Z,0.8\n":                             "want columns time and value",
		"time,value\n2026-09-07T00:00:00Z,0.8\n":                           "at least two",
	}
	for content, want := range bad {
		p := writeFileT(t, t.TempDir(), "h.csv", content)
		err := Command(context.Background(), []string{"--history", p, "--target", "0.8", "--schedule", "@daily"}, io.Discard, io.Discard)
		var ie *InputError
		if !errors.As(err, &ie) || !strings.Contains(err.Error(), want) {
			t.Errorf("%q: %v, want an input error with %q", content, err, want)
		}
	}
	var ie *InputError
	if err := Command(context.Background(), []string{"--history", hist, "--line", line}, io.Discard, io.Discard); !errors.As(err, &ie) || !strings.Contains(err.Error(), "name the ones that watch it with --line-triggers") {
		t.Errorf("a line with two triggers: %v", err)
	}
	if err := Command(context.Background(), []string{"--history", hist, "--line", line, "--line-triggers", "auc"}, io.Discard, io.Discard); !errors.As(err, &ie) || !strings.Contains(err.Error(), `no trigger "auc"; its triggers are auc-drop, late-share`) {
		t.Errorf("an unknown line trigger: %v", err)
	}
	pol := writeFileT(t, dir, "p.yaml", "policies:\n- name: weekly\n  schedul: {cron: '@weekly'}\n")
	if err := Command(context.Background(), []string{"--history", hist, "--target", "0.8", "--policies", pol}, io.Discard, io.Discard); !errors.As(err, &ie) || !strings.Contains(err.Error(), `unknown field "schedul"`) {
		t.Errorf("a policy file with a typo: %v", err)
	}
}

func TestPolicyFile(t *testing.T) {
	p := writeFileT(t, t.TempDir(), "p.yaml", `policies:
- name: weekly
  schedule: {cron: "30 2 * * 1", timeZone: Europe/London}
- name: auc-0.80-6h
  triggers: [{name: auc, below: 0.80, forSeconds: 21600, everySeconds: 300}]
  cooldownSeconds: 86400
  freshDataAtLeast: 20000
- name: cusum
  cusum: {k: 0.005, h: 0.05}
`)
	ps, err := LoadPolicies(p)
	if err != nil {
		t.Fatal(err)
	}
	if len(ps) != 3 || ps[0].Schedule.Cron != "30 2 * * 1" || *ps[1].Triggers[0].Below != 0.80 || *ps[1].FreshDataAtLeast != 20000 || ps[2].CUSUM.H != 0.05 {
		t.Errorf("policies %+v", ps)
	}
}

func TestStalenessCommand(t *testing.T) {
	var b strings.Builder
	b.WriteString("time,value\n")
	for d := 0; d < 40; d++ {
		fmt.Fprintf(&b, "%s,%.5f\n", t0.Add(time.Duration(d)*24*time.Hour+12*time.Hour).Format(time.RFC3339), 0.845*math.Exp(-0.002*float64(d)))
	}
	dir := t.TempDir()
	p := writeFileT(t, dir, "batches.csv", b.String())
	var stdout bytes.Buffer
	chart := filepath.Join(dir, "decay.svg")
	err := Command(context.Background(), []string{"staleness", "--history", p, "--trained-at", t0.Format(time.RFC3339), "--target", "0.80", "--margin", "0.01", "--chart", chart}, &stdout, io.Discard)
	if err != nil {
		t.Fatal(err)
	}
	// 0.8458 e^(-0.002 d) (the batches are measured at noon, so d runs
	// from 0.5) = 0.81 at d = 21.7: weekly.
	for _, want := range []string{"best fit: exponential", `suggested schedule: cron "0 3 * * 1"`, "21.7 days after training"} {
		if !strings.Contains(stdout.String(), want) {
			t.Errorf("output lacks %q:\n%s", want, stdout.String())
		}
	}
	if _, err := os.Stat(chart); err != nil {
		t.Error(err)
	}
}
