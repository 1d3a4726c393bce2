package backtest

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// With labels two hours late, a step drop is acted on exactly two hours
// later than with labels at once, and the replay says what that cost.
func TestLabelDelayCostsOneDelay(t *testing.T) {
	drop := t0.Add(2*24*time.Hour + 3*time.Hour)
	h := stepDrop(5*24*time.Hour, drop)
	p := triggerPolicy("trigger", 0.78, time.Hour, 5*time.Minute)
	o := opts(0.78)
	o.LabelDelay = 2 * time.Hour
	rep, err := Backtest(h, []Policy{p}, o)
	if err != nil {
		t.Fatal(err)
	}
	res := rep.Results[1]
	if len(res.Retrains) != 1 || !res.Retrains[0].Start.Equal(drop.Add(3*time.Hour)) {
		t.Fatalf("retrains %+v, want one at the drop + 1 h window + 2 h label delay (%s)", res.Retrains, drop.Add(3*time.Hour))
	}
	c := res.LabelDelayCost
	if c == nil || c.MedianDelaySeconds == nil || *c.MedianDelaySeconds != (2*time.Hour).Seconds() || c.BelowTargetSeconds != (2*time.Hour).Seconds() || c.Retrains != 0 {
		t.Fatalf("label delay cost %+v", c)
	}
	var b bytes.Buffer
	if err := WriteTable(&b, rep); err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"what late labels cost", "trigger: +2h median delay, +2h below target, +0 retrains", "its labels come in 2h0m0s later (--label-delay)"} {
		if !strings.Contains(b.String(), want) {
			t.Errorf("report lacks %q:\n%s", want, b.String())
		}
	}
	// Labels at once: no cost is reported.
	rep, err = Backtest(h, []Policy{p}, opts(0.78))
	if err != nil {
		t.Fatal(err)
	}
	if rep.Results[1].LabelDelayCost != nil {
		t.Errorf("a cost without late labels: %+v", rep.Results[1].LabelDelayCost)
	}
}

// A trigger that does not know its labels are late looks at a window whose
// points are not in yet: it can judge nothing, and the drop is missed.
func TestTriggerBlindToTheDelay(t *testing.T) {
	drop := t0.Add(2 * 24 * time.Hour)
	h := stepDrop(4*24*time.Hour, drop)
	for _, tm := range h.Points {
		h.LabelledAt = append(h.LabelledAt, tm.T.Add(3*time.Hour))
	}
	p := triggerPolicy("blind", 0.78, time.Hour, 5*time.Minute)
	zero := int32(0)
	p.Triggers[0].LabelDelaySeconds = &zero
	res, err := Replay(h, p, opts(0.78), 0.85)
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Retrains) != 0 || res.Missed != 1 {
		t.Errorf("retrains %+v, missed %d; want none and the drop missed", res.Retrains, res.Missed)
	}
}

// A history with the time each point's labels came in (labelled_at): a
// line whose triggers wait out its label delay acts that much later, and
// the report says what it cost.
func TestCommandWithLabelTimes(t *testing.T) {
	dir := t.TempDir()
	var b strings.Builder
	b.WriteString("time,value,labelled_at\n")
	drop := t0.Add(4*24*time.Hour + 6*time.Hour)
	for tm := t0; tm.Before(t0.Add(10 * 24 * time.Hour)); tm = tm.Add(15 * time.Minute) {
		v := 0.85
		if !tm.Before(drop) {
			v = 0.74
		}
		fmt.Fprintf(&b, "%s,%.3f,%s\n", tm.Format(time.RFC3339), v, tm.Add(3*time.Hour).Format(time.RFC3339))
	}
	hist := writeFileT(t, dir, "history.csv", b.String())
	line := writeFileT(t, dir, "line.yaml", strings.Replace(lineYAML, "  cooldownSeconds: 43200\n", "  cooldownSeconds: 43200\n  labels: {delaySeconds: 10800}\n", 1))
	out := filepath.Join(dir, "report.json")
	var stdout, stderr bytes.Buffer
	if err := Command(context.Background(), []string{"--history", hist, "--line", line, "--line-triggers", "auc-drop", "--out", out}, &stdout, &stderr); err != nil {
		t.Fatalf("%v\n%s", err, stderr.String())
	}
	raw, _ := os.ReadFile(out)
	var rep Report
	if err := json.Unmarshal(raw, &rep); err != nil {
		t.Fatal(err)
	}
	var res *Result
	for _, r := range rep.Results {
		if r.Policy == "line late-risk" {
			res = r
		}
	}
	// The line's trigger (0.78 for 2 h, every 15 m) fires 2 h after the
	// drop with labels at once; with them 3 h late, 5 h after.
	var byTrigger []Retrain
	if res != nil {
		for _, r := range res.Retrains {
			if r.Reason == "Trigger/auc-drop" {
				byTrigger = append(byTrigger, r)
			}
		}
	}
	if len(byTrigger) != 1 || !byTrigger[0].Start.Equal(drop.Add(5*time.Hour)) {
		t.Fatalf("the line's trigger started %+v, want one retrain at %s", byTrigger, drop.Add(5*time.Hour))
	}
	if c := res.LabelDelayCost; c == nil || c.MedianDelaySeconds == nil || *c.MedianDelaySeconds != (3*time.Hour).Seconds() {
		t.Fatalf("label delay cost %+v", res.LabelDelayCost)
	}
	for _, want := range []string{"line late-risk: +3h median delay", "seen by triggers only once its labels are in (the history's labelled_at)"} {
		if !strings.Contains(stdout.String(), want) {
			t.Errorf("output lacks %q:\n%s", want, stdout.String())
		}
	}
	// A label that comes in before its prediction is refused, naming the row.
	bad := writeFileT(t, dir, "bad.csv", "time,value,labelled_at\n2026-09-07T00:00:00Z,0.8,2026-09-06T23:00:00Z\n2026-09-07T00:15:00Z,0.8,2026-09-07T01:00:00Z\n")
	err := Command(context.Background(), []string{"--history", bad, "--target", "0.8", "--schedule", "@daily"}, &stdout, &stderr)
	if err == nil || !strings.Contains(err.Error(), "labelled_at 2026-09-06T23:00:00Z is before the point's time") {
		t.Errorf("error %v", err)
	}
}
