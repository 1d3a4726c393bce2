package integration

import (
	"bytes"
	"context"
	"errors"
	"io"
	"strings"
	"testing"
	"time"

	"plumbline.dev/plumbline/internal/engine/promq"
	"plumbline.dev/plumbline/internal/tools/backtest"
)

// plumbline backtest reads its history from the real Prometheus, and its
// replay of a trigger agrees with the controller: on the "sustained"
// scenario the controller's trigger (below 0.78 for an hour, judged every
// minute) fires at 04:00 (TestTriggerSustainedDropFiresOnce), and so does
// the replay's.
func TestBacktestFromPrometheus(t *testing.T) {
	if prometheusURL == "" {
		t.Skip("prometheus is not installed")
	}
	ctx := context.Background()
	client, err := promq.New(prometheusURL, 10*time.Second)
	if err != nil {
		t.Fatal(err)
	}
	h, err := backtest.LoadPrometheus(ctx, client, `larkspur_late_risk_roc_auc{scenario="sustained"}`, day0, hm(11, 59), time.Minute)
	if err != nil {
		t.Fatal(err)
	}
	if len(h.Points) != 12*60 {
		t.Errorf("%d points, want 720", len(h.Points))
	}
	p, err := backtest.ParseTrigger("below=0.78,for=1h,every=1m")
	if err != nil {
		t.Fatal(err)
	}
	o := backtest.DefaultOptions()
	o.Target = 0.78
	rep, err := backtest.Backtest(h, []backtest.Policy{p}, o)
	if err != nil {
		t.Fatal(err)
	}
	res := rep.Results[1]
	if len(res.Retrains) == 0 || !res.Retrains[0].Start.Equal(hm(4, 0)) {
		t.Errorf("replayed retrains %+v, want the first at 04:00 as the controller's", res.Retrains)
	}

	// A query with many series must be aggregated first.
	_, err = backtest.LoadPrometheus(ctx, client, `larkspur_late_risk_roc_auc`, day0, hm(1, 0), time.Minute)
	var ie *backtest.InputError
	if !errors.As(err, &ie) || !strings.Contains(err.Error(), "aggregate them to one") {
		t.Errorf("many series: %v", err)
	}

	// The command, end to end, on the same server.
	var out bytes.Buffer
	err = backtest.Command(ctx, []string{"--prometheus-url", prometheusURL, "--query", `larkspur_late_risk_roc_auc{scenario="sustained"}`,
		"--from", day0.Format(time.RFC3339), "--to", hm(11, 59).Format(time.RFC3339), "--step", "1m",
		"--target", "0.78", "--trigger", "below=0.78,for=1h,every=1m", "--schedule", "0 6 * * *",
		// Twelve hours of history: a retrain restores the healthy level,
		// and per-month rates mean little.
		"--after-retrain", "0.82", "--max-per-month", "1000"}, &out, io.Discard)
	if err != nil {
		t.Fatal(err)
	}
	mustContain(t, "backtest output", out.String(), "prometheus: larkspur_late_risk_roc_auc", "recommended: trigger below=0.78,for=1h,every=1m")
}
