package demo

import (
	"bytes"
	"context"
	"errors"
	"io"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"
)

// demo world init writes the shared directory the story's pods use, with a
// models directory every pod user may write to; demo world change starts a
// phase and marks the broken feed's phases backfilled once it is fixed.
func TestWorldCommand(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "shared")
	var out bytes.Buffer
	if err := WorldCommand([]string{"init", "--dir", dir}, &out, &out); err != nil {
		t.Fatalf("init: %v\n%s", err, out.String())
	}
	for _, f := range []string{"world.json", "models/late-risk-v0.json", "models/late-risk-rules.json", "models/late-risk-vendor.json"} {
		if _, err := os.Stat(filepath.Join(dir, f)); err != nil {
			t.Errorf("init did not write %s: %v", f, err)
		}
	}
	if fi, err := os.Stat(filepath.Join(dir, "models")); err != nil || fi.Mode().Perm() != 0o777 || fi.Mode()&os.ModeSticky == 0 {
		t.Errorf("the models directory should be writable by every user, sticky like /tmp: %v %v", fi.Mode(), err)
	}
	if m, err := ReadArtifact("file://" + filepath.Join(dir, "models/late-risk-v0.json")); err != nil || m.Kind != "logistic" {
		t.Errorf("the imported model: %+v %v", m, err)
	}
	// The vendor's export ranks parcels upside down: the gate's minimum
	// ROC AUC (0.70 in the story) refuses it.
	w0, err := LoadWorld(filepath.Join(dir, "world.json"))
	if err != nil {
		t.Fatal(err)
	}
	vendor, err := ReadArtifact("file://" + filepath.Join(dir, "models/late-risk-vendor.json"))
	if err != nil {
		t.Fatal(err)
	}
	ps := w0.Sample(time.Now().Add(-time.Minute), time.Now(), 4000, 9)
	if auc := aucOf(vendor, ps); auc > 0.4 {
		t.Errorf("the vendor's model has ROC AUC %.3f; the story needs one the gate refuses", auc)
	}
	if err := WorldCommand([]string{"change", "--dir", dir, "--fenwick", "--feed-broken", "--note", "Fenwick opens"}, &out, &out); err != nil {
		t.Fatal(err)
	}
	if err := WorldCommand([]string{"change", "--dir", dir, "--fenwick", "--note", "feed fixed"}, &out, &out); err != nil {
		t.Fatal(err)
	}
	w, err := LoadWorld(filepath.Join(dir, "world.json"))
	if err != nil {
		t.Fatal(err)
	}
	if len(w.Phases) != 3 || !w.Phases[1].FeedBroken || !w.Phases[1].Backfilled || w.Phases[2].FeedBroken || !w.Phases[2].Fenwick {
		t.Errorf("phases after two changes: %+v", w.Phases)
	}
	if !strings.Contains(out.String(), "WORLD: feed fixed") {
		t.Errorf("change should say what happened: %s", out.String())
	}

	var errOut bytes.Buffer
	if err := WorldCommand([]string{"change", "--dir", dir}, io.Discard, &errOut); !errors.Is(err, ErrUsage) || !strings.Contains(errOut.String(), "--note is required") {
		t.Errorf("change without --note: %v %q", err, errOut.String())
	}
	errOut.Reset()
	if err := WorldCommand([]string{"start"}, io.Discard, &errOut); !errors.Is(err, ErrUsage) || !strings.Contains(errOut.String(), "init") {
		t.Errorf("an unknown world command: %v %q", err, errOut.String())
	}
}

// demo serve loads $MODEL_URI, scores the parcels of the moment and
// exports the monitoring: the imported model's quality is good in ordinary
// weeks and falls when the peak begins (the world file changes under the
// running server); the feed breaking shows in the missing share.
func TestServeExportsMonitoring(t *testing.T) {
	if testing.Short() {
		t.Skip("runs a server for a few seconds")
	}
	dir := t.TempDir()
	if _, err := PrepareWorld(dir, time.Now()); err != nil {
		t.Fatal(err)
	}
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	addr := l.Addr().String()
	l.Close()
	t.Setenv("MODEL_URI", "file://"+filepath.Join(dir, "models", "late-risk-v0.json"))
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	var out syncBuffer
	go func() {
		done <- Serve(ctx, []string{"--world", filepath.Join(dir, "world.json"), "--listen", addr, "--parcels-per-second", "5000", "--window", "2000"}, &out, &out)
	}()
	defer func() {
		cancel()
		if err := <-done; err != nil {
			t.Errorf("serve ended with %v", err)
		}
	}()
	ordinary := waitMetric(t, addr, "larkspur_late_risk_roc_auc", func(v float64) bool { return v > 0.7 })
	if m := waitMetric(t, addr, "larkspur_feature_missing_ratio", func(float64) bool { return true }); m != 0 {
		t.Errorf("missing share with a whole feed: %v", m)
	}
	if err := WorldCommand([]string{"change", "--dir", dir, "--peak", "--feed-broken", "--note", "the peak"}, io.Discard, io.Discard); err != nil {
		t.Fatal(err)
	}
	peak := waitMetric(t, addr, "larkspur_late_risk_roc_auc", func(v float64) bool { return v < ordinary-0.1 })
	missing := waitMetric(t, addr, "larkspur_feature_missing_ratio", func(v float64) bool { return v > 0.2 })
	t.Logf("ROC AUC of the imported model: ordinary %.3f, peak %.3f; missing share with the broken feed %.3f", ordinary, peak, missing)
	if !strings.Contains(out.String(), "world: the peak") {
		t.Errorf("the server should log the world's change:\n%s", out.String())
	}
}

// A scorer that cannot load its model fails, naming the variable or the
// file, so its pod never becomes Ready.
func TestServeRefusesWithoutModel(t *testing.T) {
	dir := t.TempDir()
	if _, err := PrepareWorld(dir, time.Now()); err != nil {
		t.Fatal(err)
	}
	args := []string{"--world", filepath.Join(dir, "world.json"), "--listen", "127.0.0.1:0"}
	t.Setenv("MODEL_URI", "")
	if err := Serve(context.Background(), args, io.Discard, io.Discard); err == nil || !strings.Contains(err.Error(), "$MODEL_URI is not set") {
		t.Errorf("without MODEL_URI: %v", err)
	}
	t.Setenv("MODEL_URI", "file://"+filepath.Join(dir, "models", "late-risk-v9.json"))
	if err := Serve(context.Background(), args, io.Discard, io.Discard); err == nil || !strings.Contains(err.Error(), "late-risk-v9.json") {
		t.Errorf("with a missing model: %v", err)
	}
}

// waitMetric scrapes addr until the gauge's value satisfies ok, and
// returns it.
func waitMetric(t *testing.T, addr, name string, ok func(float64) bool) float64 {
	t.Helper()
	deadline := time.Now().Add(20 * time.Second)
	last := "not scraped"
	for time.Now().Before(deadline) {
		if v, err := scrapeGauge(addr, name); err != nil {
			last = err.Error()
		} else if ok(v) {
			return v
		} else {
			last = strconv.FormatFloat(v, 'f', 4, 64)
		}
		time.Sleep(100 * time.Millisecond)
	}
	t.Fatalf("%s never as wanted; last: %s", name, last)
	return 0
}

func scrapeGauge(addr, name string) (float64, error) {
	resp, err := http.Get("http://" + addr + "/metrics")
	if err != nil {
		return 0, err
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	if err != nil {
		return 0, err
	}
	for _, l := range strings.Split(string(b), "\n") {
		if f := strings.Fields(l); len(f) == 2 && (f[0] == name || strings.HasPrefix(f[0], name+"{")) {
			return strconv.ParseFloat(f[1], 64)
		}
	}
	return 0, errors.New(name + " not exported yet")
}

// syncBuffer is a buffer the server goroutine writes while the test reads.
type syncBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

func (s *syncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}
