package integration

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"runtime"
	"runtime/pprof"
	"sort"
	"sync"
	"testing"
	"time"

	"k8s.io/client-go/kubernetes"
	"sigs.k8s.io/controller-runtime/pkg/client"

	appsv1 "k8s.io/api/apps/v1"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/testenv/promserver"
)

// probeNS holds the fleet benchmark's probe lines: lines on the shared
// templates whose quality drops at known times, so the benchmark measures
// how long a real drop takes to be seen. They are suspended (judged, never
// acted on) and their writes are not counted as the fleet's.
const probeNS = "fleet-probe"

// probeDrops is when each probe line's auc-drop trigger is due to fire,
// counted from the clock's origin: its quality drops below the threshold
// forSeconds (30 minutes) before. One a minute, from 2 to 21 minutes, covers the fresh start and
// the stretch at rest of fleets up to 10,000 lines.
var probeDrops = func() []time.Duration {
	var out []time.Duration
	for i := range 20 {
		out = append(out, time.Duration(2+i)*time.Minute)
	}
	return out
}()

const probeFor = 30 * time.Minute

func probeName(i int) string { return fmt.Sprintf("probe-%02d", i) }

// probeHistory is the probes' series: healthy as the fleet's, then the
// ROC AUC at 0.6 (below the 0.7 threshold) from its drop on.
func probeHistory(ns string, origin time.Time) []promserver.Series {
	var out []promserver.Series
	for i, due := range probeDrops {
		drop := origin.Add(due - probeFor)
		for _, s := range fleetHistory(ns, 1) {
			s.Labels = map[string]string{"namespace": ns, "line": probeName(i)}
			if s.Name == "fleet_late_risk_roc_auc" {
				for k := range s.Samples {
					if !s.Samples[k].T.Before(drop) {
						s.Samples[k].V = 0.6
					}
				}
			}
			out = append(out, s)
		}
	}
	return out
}

func createProbes(ctx context.Context, ns string) error {
	for i := range probeDrops {
		name := probeName(i)
		if err := k8s.Create(ctx, servingDeployment(ns, name+"-scorer", "scorer")); err != nil {
			return fmt.Errorf("create Deployment of %s: %w", name, err)
		}
		line := scaleLine(ns, name, true)
		line.Object["spec"].(map[string]any)["suspend"] = true
		if err := k8s.Create(ctx, line); err != nil {
			return fmt.Errorf("create probe line %s: %w", name, err)
		}
	}
	return nil
}

func deleteProbes(ctx context.Context, ns string) error {
	if err := k8s.DeleteAllOf(ctx, &v1alpha1.ModelLine{}, client.InNamespace(ns)); err != nil {
		return fmt.Errorf("delete probe lines: %w", err)
	}
	if err := k8s.DeleteAllOf(ctx, &appsv1.Deployment{}, client.InNamespace(ns)); err != nil {
		return fmt.Errorf("delete probe Deployments: %w", err)
	}
	return nil
}

// watchProbes records, on the manager's clock, when each probe line's
// auc-drop trigger is first seen Firing (read every half second). The
// function it returns stops watching and gives what it saw.
func watchProbes(b *testing.B, ctx context.Context, ns string, now func() time.Time) func() map[string]time.Time {
	seen := map[string]time.Time{}
	var mu sync.Mutex
	wctx, cancel := context.WithCancel(ctx)
	done := make(chan struct{})
	// A watch, not polling: the benchmark's own client should add next to
	// nothing to the process's allocations while the manager is measured.
	wc, err := client.NewWithWatch(adminConfig, client.Options{Scheme: k8s.Scheme()})
	if err != nil {
		b.Fatalf("watch client: %v", err)
	}
	note := func(l *v1alpha1.ModelLine) {
		at := now()
		mu.Lock()
		defer mu.Unlock()
		for _, t := range l.Status.Triggers {
			if _, ok := seen[l.Name]; !ok && t.Name == "auc-drop" && t.State == v1alpha1.TriggerFiring {
				seen[l.Name] = at
			}
		}
	}
	go func() {
		defer close(done)
		for wctx.Err() == nil {
			w, err := wc.Watch(wctx, &v1alpha1.ModelLineList{}, client.InNamespace(ns))
			if err != nil {
				time.Sleep(time.Second)
				continue
			}
			for ev := range w.ResultChan() {
				if l, ok := ev.Object.(*v1alpha1.ModelLine); ok {
					note(l)
				}
			}
			w.Stop()
		}
	}()
	return func() map[string]time.Time {
		cancel()
		<-done
		mu.Lock()
		defer mu.Unlock()
		return seen
	}
}

// printDetection reports the delay from when each probe's drop could first
// be seen as Firing (its first point below the threshold plus forSeconds)
// to when its line said so, for the probes due after every line had been
// judged once and before the watch ended.
func printDetection(out func(string, ...any), seen map[string]time.Time, origin, judged, ended time.Time, every time.Duration) {
	var delays []time.Duration
	missed := 0
	for i, due := range probeDrops {
		at := origin.Add(due)
		if !at.After(judged.Add(every)) || at.Add(every+5*time.Second).After(ended) {
			continue
		}
		d, ok := seen[probeName(i)]
		if !ok {
			missed++
			continue
		}
		delays = append(delays, d.Sub(at))
	}
	if len(delays)+missed == 0 {
		out("  detection delay: no probe was due inside the stretch")
		return
	}
	sort.Slice(delays, func(i, j int) bool { return delays[i] < delays[j] })
	if len(delays) == 0 {
		out("  detection delay: none of %d due probes seen Firing", missed)
		return
	}
	out("  detection delay of a real drop (%d probes, forSeconds %s, everySeconds %s): forSeconds + %s median, + %s worst; target forSeconds + everySeconds + 5s; %d not seen",
		len(delays), probeFor, every, delays[len(delays)/2].Round(100*time.Millisecond), delays[len(delays)-1].Round(100*time.Millisecond), missed)
}

// profileCPU writes this process's CPU profile (the manager's, with the
// benchmark's own client) to dir/name.pprof until the returned function is
// called. Without a dir it does nothing.
func profileCPU(b *testing.B, dir, name string) func() {
	if dir == "" {
		return func() {}
	}
	f, err := os.Create(filepath.Join(dir, name+".pprof"))
	if err != nil {
		b.Fatal(err)
	}
	if err := pprof.StartCPUProfile(f); err != nil {
		b.Fatal(err)
	}
	return func() {
		pprof.StopCPUProfile()
		_ = f.Close()
	}
}

// heapProfile writes this process's heap profile (live and allocated since
// the start) to dir/name.pprof.
func heapProfile(b *testing.B, dir, name string) {
	if dir == "" {
		return
	}
	runtime.GC()
	f, err := os.Create(filepath.Join(dir, name+".pprof"))
	if err != nil {
		b.Fatal(err)
	}
	defer f.Close()
	if err := pprof.Lookup("heap").WriteTo(f, 0); err != nil {
		b.Fatal(err)
	}
}

// profileAPIServer takes a CPU profile of the API server for d, from its
// own /debug/pprof endpoint, as the test's administrator; the channel closes
// when it is written.
func profileAPIServer(b *testing.B, dir, name string, d time.Duration) <-chan struct{} {
	done := make(chan struct{})
	if dir == "" {
		close(done)
		return done
	}
	cs, err := kubernetes.NewForConfig(adminConfig)
	if err != nil {
		b.Fatal(err)
	}
	go func() {
		defer close(done)
		raw, err := cs.CoreV1().RESTClient().Get().AbsPath("/debug/pprof/profile").
			Param("seconds", fmt.Sprint(int(d.Seconds()))).DoRaw(context.Background())
		if err != nil {
			fmt.Printf("API server profile: %v\n", err)
			return
		}
		if err := os.WriteFile(filepath.Join(dir, name+".pprof"), raw, 0o644); err != nil {
			fmt.Printf("API server profile: %v\n", err)
		}
	}()
	return done
}
