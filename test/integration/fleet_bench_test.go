package integration

import (
	"context"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"runtime/debug"
	rtmetrics "runtime/metrics"
	"sort"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	dto "github.com/prometheus/client_model/go"
	appsv1 "k8s.io/api/apps/v1"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/metrics"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/clock"
	"plumbline.dev/plumbline/internal/manager"
	"plumbline.dev/plumbline/internal/testenv/promserver"
)

// BenchmarkFleetScale is `make bench-fleet`: N lines (PLUMBLINE_FLEET_LINES,
// default 10,000), each with three triggers judged every minute, its own
// serving Deployment and a history of ten archived versions, on one manager
// with the real API server and a real Prometheus holding four hours of the
// fleet's series (PLUMBLINE_FLEET_QPS sets the manager's --kube-api-qps,
// PLUMBLINE_FLEET_WORKERS its --max-concurrent-reconciles,
// PLUMBLINE_FLEET_MEMLIMIT the memory limit GOMEMLIMIT would give the
// manager's process, set for this process only: the API server, etcd and
// Prometheus it starts would inherit GOMEMLIMIT itself).
// A share of the lines (PLUMBLINE_FLEET_SHARED, default
// 0.5) use three shared query templates, the others literal queries of
// their own. It runs the manager on the real clock (a fresh
// start, a stretch at rest, a restart) and then on a clock ten times faster
// (the query load of ten times the lines), and prints what it measured.
// The fleet's numbers are synthetic.
//
//	PLUMBLINE_FLEET_LINES=1000 make bench-fleet
func BenchmarkFleetScale(b *testing.B) {
	if prometheusURL == "" {
		b.Skip("prometheus is not installed")
	}
	n := 10000
	if s := os.Getenv("PLUMBLINE_FLEET_LINES"); s != "" {
		v, err := strconv.Atoi(s)
		if err != nil || v < 2 {
			b.Fatalf("PLUMBLINE_FLEET_LINES=%q: want a number of lines, at least 2", s)
		}
		n = v
	}
	rest := 3 * time.Minute
	if s := os.Getenv("PLUMBLINE_FLEET_REST"); s != "" {
		d, err := time.ParseDuration(s)
		if err != nil {
			b.Fatalf("PLUMBLINE_FLEET_REST=%q: %v", s, err)
		}
		rest = d
	}
	sharedShare := 0.5
	if s := os.Getenv("PLUMBLINE_FLEET_SHARED"); s != "" {
		v, err := strconv.ParseFloat(s, 64)
		if err != nil || v < 0 || v > 1 {
			b.Fatalf("PLUMBLINE_FLEET_SHARED=%q: want the share of lines on shared templates, 0 to 1", s)
		}
		sharedShare = v
	}
	shared := int(math.Round(sharedShare * float64(n)))
	var qps float32 // the manager's default
	if s := os.Getenv("PLUMBLINE_FLEET_QPS"); s != "" {
		v, err := strconv.ParseFloat(s, 32)
		if err != nil || v <= 0 {
			b.Fatalf("PLUMBLINE_FLEET_QPS=%q: want the manager's requests per second", s)
		}
		qps = float32(v)
	}
	workers := 0 // the manager's default
	if s := os.Getenv("PLUMBLINE_FLEET_WORKERS"); s != "" {
		v, err := strconv.Atoi(s)
		if err != nil || v <= 0 {
			b.Fatalf("PLUMBLINE_FLEET_WORKERS=%q: want the manager's --max-concurrent-reconciles", s)
		}
		workers = v
	}
	if s := os.Getenv("PLUMBLINE_FLEET_MEMLIMIT"); s != "" {
		mib, err := strconv.Atoi(strings.TrimSuffix(s, "MiB"))
		if err != nil || mib <= 0 {
			b.Fatalf("PLUMBLINE_FLEET_MEMLIMIT=%q: want a size in MiB, such as 800MiB", s)
		}
		defer debug.SetMemoryLimit(debug.SetMemoryLimit(int64(mib) << 20))
	}
	if os.Getenv("GOMEMLIMIT") != "" {
		b.Fatal("GOMEMLIMIT would apply to the API server, etcd and Prometheus too: set PLUMBLINE_FLEET_MEMLIMIT instead")
	}
	if b.N > 1 {
		b.Skip("one iteration is the whole run")
	}
	ctx := context.Background()
	ns := "fleet-scale"
	out := func(format string, args ...any) { fmt.Printf(format+"\n", args...) }

	// A Prometheus of its own, with the fleet's history.
	t0 := time.Now()
	dir, err := os.MkdirTemp("", "plumbline-fleet-")
	if err != nil {
		b.Fatal(err)
	}
	defer os.RemoveAll(dir)
	origin := day0.Add(3 * time.Hour)
	history := append(fleetHistory(ns, n), probeHistory(probeNS, origin)...)
	prom, err := promserver.Start(filepath.Join(dir, "prometheus"), history)
	if err != nil {
		b.Fatal(err)
	}
	defer prom.Stop()
	out("fleet: %d lines x 3 triggers, %d on shared templates; Prometheus backfilled in %s", n, shared, time.Since(t0).Round(time.Second))
	out("manager: --kube-api-qps %s, --max-concurrent-reconciles %s; memory limit (as GOMEMLIMIT) %s", orDefault(os.Getenv("PLUMBLINE_FLEET_QPS")),
		orDefault(os.Getenv("PLUMBLINE_FLEET_WORKERS")), orDefault(os.Getenv("PLUMBLINE_FLEET_MEMLIMIT")))

	withoutSuiteManager(b)
	createNamespaceB(b, ns)
	t0 = time.Now()
	if err := createFleet(ctx, ns, n, shared); err != nil {
		b.Fatal(err)
	}
	defer func() {
		_ = k8s.DeleteAllOf(ctx, &v1alpha1.ModelLine{}, client.InNamespace(ns))
		_ = k8s.DeleteAllOf(ctx, &v1alpha1.ModelVersion{}, client.InNamespace(ns))
		_ = k8s.DeleteAllOf(ctx, &appsv1.Deployment{}, client.InNamespace(ns))
	}()
	out("created %d lines, %d Deployments and %d versions (status written, %d labelled history) in %s", n, n, 10*n, 9*n, time.Since(t0).Round(time.Second))

	if err := resetPeakRSS(); err != nil {
		b.Fatal(err)
	}
	apiPID, etcdPID := childPID("kube-apiserver"), childPID("etcd")
	profiles := os.Getenv("PLUMBLINE_FLEET_PROFILES")
	if profiles != "" {
		if err := os.MkdirAll(profiles, 0o755); err != nil {
			b.Fatal(err)
		}
	}
	var writes atomic.Int64
	var clk *clock.Scaled
	run := func(speed float64) (stop func()) {
		mctx, cancel := context.WithCancel(ctx)
		clk = clock.NewScaled(origin, speed)
		mgr, err := manager.New(mctx, managerConfig, manager.Options{MetricsAddr: "0", ProbeAddr: "0", APIQPS: qps, MaxConcurrentReconciles: workers,
			Clock: clk, AllowSecondManager: true, PrometheusURL: prom.URL,
			WrapClient: func(c client.Client) client.Client { return &writeCounter{Client: c, n: &writes, skip: probeNS} }})
		if err != nil {
			cancel()
			b.Fatal(err)
		}
		done := make(chan error, 1)
		go func() { done <- mgr.Start(mctx) }()
		return func() {
			cancel()
			<-done
		}
	}
	answers := func() float64 { return metricSumB(b, "plumbline_window_answers_total", nil) }
	untilJudged := func(from float64, lines int, limit time.Duration) time.Duration {
		start := time.Now()
		for answers()-from < float64(3*lines) {
			if time.Since(start) > limit {
				b.Fatalf("only %v of %d windows judged after %s", answers()-from, 3*lines, limit)
			}
			time.Sleep(200 * time.Millisecond)
		}
		return time.Since(start)
	}

	quiet := func() {
		// Until the manager has written nothing for ten seconds.
		last, since := writes.Load(), time.Now()
		for time.Since(since) < 10*time.Second {
			time.Sleep(time.Second)
			if w := writes.Load(); w != last {
				last, since = w, time.Now()
			}
		}
	}

	// The first start on the fleet: the manager also completes the
	// synthetic versions' statuses, once.
	a0, w0 := answers(), writes.Load()
	stop := run(1)
	first := untilJudged(a0, n, 30*time.Minute)
	out("first start on the fleet (the versions' statuses completed too): every line judged after %s, %d API writes so far",
		first.Round(100*time.Millisecond), writes.Load()-w0)
	quiet()
	out("  settled after %d API writes", writes.Load()-w0)
	stop()

	// A fresh start: every line's triggers are new (never judged). The
	// probe lines join the fleet for this stretch: their quality drops at
	// known times, which measures the detection delay.
	if err := forgetTriggers(ctx, ns); err != nil {
		b.Fatal(err)
	}
	createNamespaceB(b, probeNS)
	if err := createProbes(ctx, probeNS); err != nil {
		b.Fatal(err)
	}
	a0, w0 = answers(), writes.Load()
	stopProfile := profileCPU(b, profiles, "manager-fresh-start")
	apiProfile := profileAPIServer(b, profiles, "kube-apiserver-fresh-start", 30*time.Second)
	stop = run(1)
	probes := watchProbes(b, ctx, probeNS, func() time.Time { return clk.Now() })
	fresh := untilJudged(a0, n+len(probeDrops), 15*time.Minute)
	stopProfile()
	<-apiProfile
	judgedAt := clk.Now()
	out("fresh start (no trigger judged yet, versions settled): every line judged after %s, %d API writes",
		fresh.Round(100*time.Millisecond), writes.Load()-w0)
	quiet()
	time.Sleep(60 * time.Second) // the spread settles
	heapProfile(b, profiles, "manager-heap-before-rest")
	at := measureRest(b, n, rest, 1, &writes, apiPID, etcdPID, prom.PID(), ns)
	heapProfile(b, profiles, "manager-heap-after-rest")
	at.print(out, "real clock, at rest")
	printDetection(out, probes(), origin, judgedAt, clk.Now(), time.Minute)
	stop()
	if err := deleteProbes(ctx, probeNS); err != nil {
		b.Fatal(err)
	}

	// A restart: every line was judged before.
	a0, w0 = answers(), writes.Load()
	stop = run(1)
	restart := untilJudged(a0, n, 10*time.Minute)
	out("restart: every line judged again after %s, %d API writes", restart.Round(100*time.Millisecond), writes.Load()-w0)
	stop()

	// Ten times the clock: the query load of ten times the lines.
	a0 = answers()
	stop = run(10)
	untilJudged(a0, n, 10*time.Minute)
	time.Sleep(30 * time.Second)
	stopProfile = profileCPU(b, profiles, "manager-10x")
	fast := measureRest(b, n, rest, 10, &writes, apiPID, etcdPID, prom.PID(), ns)
	stopProfile()
	fast.print(out, "10x clock, at rest")
	stop()
	if profiles != "" {
		out("profiles in %s; read one with: go tool pprof -top <file>", profiles)
	}
}

// forgetTriggers clears every line's trigger statuses, as for lines never
// judged.
func forgetTriggers(ctx context.Context, ns string) error {
	var lines v1alpha1.ModelLineList
	if err := k8s.List(ctx, &lines, client.InNamespace(ns)); err != nil {
		return err
	}
	for i := range lines.Items {
		l := &lines.Items[i]
		l.Status.Triggers = nil
		if err := k8s.Status().Update(ctx, l); err != nil {
			return fmt.Errorf("clear triggers of %s: %w", l.Name, err)
		}
	}
	return nil
}

// restFigures are what a stretch at rest measured.
type restFigures struct {
	lines                                       int
	speed                                       float64
	judgedPerMin, wantedPerMin                  float64
	sharedQueriesPerInterval                    float64
	rangeQueriesPerMin, passesPerMin, writesMin float64
	reconcileP50, reconcileP99, queueP99        time.Duration
	cpuPerPass                                  time.Duration
	allocPerPass                                uint64
	managerCPU, apiCPU, etcdCPU, promCPU        float64
	peakRSS, restRSS, liveHeap                  uint64
	series                                      int
}

func (f restFigures) print(out func(string, ...any), title string) {
	out("%s (%d lines, clock x%g):", title, f.lines, f.speed)
	out("  windows judged per minute (real time): %.0f of %.0f wanted", f.judgedPerMin, f.wantedPerMin)
	out("  Prometheus range queries per minute: %.1f (for the shared templates: %.1f per interval); passes per minute: %.0f; API writes per minute: %.1f", f.rangeQueriesPerMin, f.sharedQueriesPerInterval, f.passesPerMin, f.writesMin)
	out("  reconcile p50 / p99: %s / %s; queue wait p99: %s", f.reconcileP50, f.reconcileP99, f.queueP99)
	out("  allocated per pass (the whole process over the stretch, divided): %d KiB", f.allocPerPass>>10)
	out("  manager CPU per pass: %s; CPU (share of one core): manager %.0f%%, kube-apiserver %.0f%%, etcd %.0f%%, Prometheus %.0f%%", f.cpuPerPass, 100*f.managerCPU, 100*f.apiCPU, 100*f.etcdCPU, 100*f.promCPU)
	out("  manager process RSS at the end of the stretch %d MiB, peak %d MiB since the manager first started (the benchmark's own creation of the fleet left out, its light polling in); live heap %d MiB", f.restRSS>>20, f.peakRSS>>20, f.liveHeap>>20)
	out("  series the manager exports for the fleet's lines: %d (%.2f a line)", f.series, float64(f.series)/float64(f.lines))
}

func measureRest(b *testing.B, n int, d time.Duration, speed float64, writes *atomic.Int64, apiPID, etcdPID, promPID int, ns string) restFigures {
	f := restFigures{lines: n, speed: speed, wantedPerMin: 3 * float64(n) * speed}
	hist0 := gatherHistograms(b)
	q0 := metricSumB(b, "plumbline_prometheus_queries_total", map[string]string{"kind": "range"})
	a0 := metricSumB(b, "plumbline_window_answers_total", nil)
	own0 := metricSumB(b, "plumbline_window_answers_total", map[string]string{"source": "own"})
	p0 := metricSumB(b, "controller_runtime_reconcile_total", map[string]string{"controller": "modelline"})
	w0 := writes.Load()
	c0, api0, etcd0, prom0 := cpuTime(), procCPU(apiPID), procCPU(etcdPID), procCPU(promPID)
	var ms0 runtime.MemStats
	runtime.ReadMemStats(&ms0)
	start := time.Now()
	time.Sleep(d)
	el := time.Since(start)
	mins := el.Minutes()
	passes := metricSumB(b, "controller_runtime_reconcile_total", map[string]string{"controller": "modelline"}) - p0
	f.judgedPerMin = (metricSumB(b, "plumbline_window_answers_total", nil) - a0) / mins
	queries := metricSumB(b, "plumbline_prometheus_queries_total", map[string]string{"kind": "range"}) - q0
	own := metricSumB(b, "plumbline_window_answers_total", map[string]string{"source": "own"}) - own0
	f.rangeQueriesPerMin = queries / mins
	// Every own answer is one query; the rest answered the shared ones.
	f.sharedQueriesPerInterval = (queries - own) / (mins * speed)
	f.passesPerMin = passes / mins
	f.writesMin = float64(writes.Load()-w0) / mins
	cpu := cpuTime() - c0
	if passes > 0 {
		f.cpuPerPass = (cpu / time.Duration(passes)).Round(time.Microsecond)
	}
	f.managerCPU = cpu.Seconds() / el.Seconds()
	f.apiCPU = (procCPU(apiPID) - api0).Seconds() / el.Seconds()
	f.etcdCPU = (procCPU(etcdPID) - etcd0).Seconds() / el.Seconds()
	f.promCPU = (procCPU(promPID) - prom0).Seconds() / el.Seconds()
	hist1 := gatherHistograms(b)
	rec := hist1.delta(hist0, "controller_runtime_reconcile_time_seconds", "controller", "modelline")
	queue := hist1.delta(hist0, "workqueue_queue_duration_seconds", "name", "modelline")
	f.reconcileP50, f.reconcileP99, f.queueP99 = rec.quantile(0.5), rec.quantile(0.99), queue.quantile(0.99)
	f.peakRSS = peakResidentBytes()
	f.restRSS = residentBytes()
	var ms runtime.MemStats
	runtime.ReadMemStats(&ms)
	if passes > 0 {
		f.allocPerPass = (ms.TotalAlloc - ms0.TotalAlloc) / uint64(passes)
	}
	// The heap the collection just marked live: HeapAlloc read after it
	// would also count what the manager allocated while it ran (hundreds of
	// MiB a second on the 10x clock).
	runtime.GC()
	live := []rtmetrics.Sample{{Name: "/gc/heap/live:bytes"}}
	rtmetrics.Read(live)
	f.liveHeap = live[0].Value.Uint64()
	f.series = seriesOfNamespace(b, ns)
	return f
}

// histograms are cumulative bucket counts by family and selecting label.
type histograms map[string]map[float64]float64

func gatherHistograms(b *testing.B) histograms {
	mfs, err := metrics.Registry.Gather()
	if err != nil {
		b.Fatal(err)
	}
	out := histograms{}
	for _, mf := range mfs {
		if mf.GetType() != dto.MetricType_HISTOGRAM {
			continue
		}
		for _, m := range mf.GetMetric() {
			key := mf.GetName()
			for _, l := range m.GetLabel() {
				key += "|" + l.GetName() + "=" + l.GetValue()
			}
			bk := map[float64]float64{}
			for _, bu := range m.GetHistogram().GetBucket() {
				bk[bu.GetUpperBound()] = float64(bu.GetCumulativeCount())
			}
			bk[math.Inf(1)] = float64(m.GetHistogram().GetSampleCount())
			out[key] = bk
		}
	}
	return out
}

// bucketCounts is one histogram's cumulative counts over a stretch.
type bucketCounts struct {
	bounds []float64
	counts []float64
}

func (h histograms) delta(before histograms, name, label, value string) bucketCounts {
	var out bucketCounts
	sum := map[float64]float64{}
	for key, bk := range h {
		if !strings.HasPrefix(key, name+"|") || !strings.Contains(key+"|", "|"+label+"="+value+"|") {
			continue
		}
		for ub, c := range bk {
			sum[ub] += c - before[key][ub]
		}
	}
	for ub := range sum {
		out.bounds = append(out.bounds, ub)
	}
	sort.Float64s(out.bounds)
	for _, ub := range out.bounds {
		out.counts = append(out.counts, sum[ub])
	}
	return out
}

// quantile interpolates within the bucket that holds q, as PromQL's
// histogram_quantile does.
func (c bucketCounts) quantile(q float64) time.Duration {
	if len(c.counts) == 0 || c.counts[len(c.counts)-1] == 0 {
		return 0
	}
	total := c.counts[len(c.counts)-1]
	rank := q * total
	lower, below := 0.0, 0.0
	for i, ub := range c.bounds {
		if c.counts[i] >= rank {
			if math.IsInf(ub, 1) {
				return time.Duration(lower * float64(time.Second))
			}
			in := c.counts[i] - below
			frac := 1.0
			if in > 0 {
				frac = (rank - below) / in
			}
			return time.Duration((lower + (ub-lower)*frac) * float64(time.Second)).Round(100 * time.Microsecond)
		}
		lower, below = ub, c.counts[i]
	}
	return 0
}

func seriesOfNamespace(b *testing.B, ns string) int {
	mfs, err := metrics.Registry.Gather()
	if err != nil {
		b.Fatal(err)
	}
	n := 0
	for _, mf := range mfs {
		for _, m := range mf.GetMetric() {
			for _, l := range m.GetLabel() {
				if l.GetName() == "namespace" && l.GetValue() == ns {
					n++
				}
			}
		}
	}
	return n
}

// writeCounter counts the manager's writes to the API server, but for those
// in the namespace skip.
type writeCounter struct {
	client.Client
	n    *atomic.Int64
	skip string
}

func (w *writeCounter) count(o client.Object) {
	if w.skip == "" || o.GetNamespace() != w.skip {
		w.n.Add(1)
	}
}

func (w *writeCounter) Create(ctx context.Context, o client.Object, opts ...client.CreateOption) error {
	w.count(o)
	return w.Client.Create(ctx, o, opts...)
}

func (w *writeCounter) Update(ctx context.Context, o client.Object, opts ...client.UpdateOption) error {
	w.count(o)
	return w.Client.Update(ctx, o, opts...)
}

func (w *writeCounter) Patch(ctx context.Context, o client.Object, p client.Patch, opts ...client.PatchOption) error {
	w.count(o)
	return w.Client.Patch(ctx, o, p, opts...)
}

func (w *writeCounter) Delete(ctx context.Context, o client.Object, opts ...client.DeleteOption) error {
	w.count(o)
	return w.Client.Delete(ctx, o, opts...)
}

func (w *writeCounter) Status() client.SubResourceWriter {
	return &statusCounter{SubResourceWriter: w.Client.Status(), w: w}
}

type statusCounter struct {
	client.SubResourceWriter
	w *writeCounter
}

func (s *statusCounter) Update(ctx context.Context, o client.Object, opts ...client.SubResourceUpdateOption) error {
	s.w.count(o)
	return s.SubResourceWriter.Update(ctx, o, opts...)
}

func (s *statusCounter) Patch(ctx context.Context, o client.Object, p client.Patch, opts ...client.SubResourcePatchOption) error {
	s.w.count(o)
	return s.SubResourceWriter.Patch(ctx, o, p, opts...)
}

// residentBytes is this process's resident set now (VmRSS; 0 when it
// cannot be read).
func residentBytes() uint64 { return procStatusBytes("VmRSS:") }

// peakResidentBytes is the process's peak RSS since it began or since
// resetPeakRSS.
func peakResidentBytes() uint64 { return procStatusBytes("VmHWM:") }

// resetPeakRSS returns the memory the benchmark's own work (creating the
// fleet) left to the system and resets the peak RSS to what is resident
// now (Linux's clear_refs, value 5), so that the peak measured after it is
// the manager's, with the benchmark's light polling.
func resetPeakRSS() error {
	runtime.GC()
	debug.FreeOSMemory()
	if err := os.WriteFile("/proc/self/clear_refs", []byte("5"), 0); err != nil {
		return fmt.Errorf("reset the peak RSS: %w", err)
	}
	return nil
}

// procStatusBytes reads a kB field of /proc/self/status.
func procStatusBytes(field string) uint64 {
	raw, err := os.ReadFile("/proc/self/status")
	if err != nil {
		return 0
	}
	for _, l := range strings.Split(string(raw), "\n") {
		if rest, ok := strings.CutPrefix(l, field); ok {
			kb, _ := strconv.ParseUint(strings.TrimSpace(strings.TrimSuffix(strings.TrimSpace(rest), "kB")), 10, 64)
			return kb << 10
		}
	}
	return 0
}

// procCPU is a process's CPU time from /proc (0 when it cannot be read).
func procCPU(pid int) time.Duration {
	if pid <= 0 {
		return 0
	}
	raw, err := os.ReadFile(fmt.Sprintf("/proc/%d/stat", pid))
	if err != nil {
		return 0
	}
	s := string(raw)
	fields := strings.Fields(s[strings.LastIndexByte(s, ')')+2:])
	if len(fields) < 13 {
		return 0
	}
	ut, _ := strconv.ParseFloat(fields[11], 64)
	st, _ := strconv.ParseFloat(fields[12], 64)
	return time.Duration((ut + st) / 100 * float64(time.Second)) // USER_HZ is 100 on Linux
}

// childPID finds a direct child of this process by its command name.
func childPID(name string) int {
	entries, _ := os.ReadDir("/proc")
	for _, e := range entries {
		pid, err := strconv.Atoi(e.Name())
		if err != nil {
			continue
		}
		raw, err := os.ReadFile(fmt.Sprintf("/proc/%d/stat", pid))
		if err != nil {
			continue
		}
		s := string(raw)
		open, end := strings.IndexByte(s, '('), strings.LastIndexByte(s, ')')
		if open < 0 || end < open || s[open+1:end] != name {
			continue
		}
		fields := strings.Fields(s[end+2:])
		if len(fields) > 1 && fields[1] == strconv.Itoa(os.Getpid()) {
			return pid
		}
	}
	return 0
}

// fleetLineName names the fleet's i-th line.
func fleetLineName(i int) string { return fmt.Sprintf("route-%05d", i) }

// fleetHistory is four hours of the fleet's three series per line, one
// point a minute: healthy numbers with a little noise, so nothing fires.
func fleetHistory(ns string, n int) []promserver.Series {
	var out []promserver.Series
	for i := range n {
		l := map[string]string{"namespace": ns, "line": fleetLineName(i)}
		auc := promserver.Series{Name: "fleet_late_risk_roc_auc", Labels: l}
		psi := promserver.Series{Name: "fleet_feature_psi", Labels: l}
		miss := promserver.Series{Name: "fleet_feature_missing_ratio", Labels: l}
		for t := day0.Add(time.Hour); t.Before(day0.Add(5 * time.Hour)); t = t.Add(time.Minute) {
			k := float64(t.Sub(day0)/time.Minute) + float64(i)
			auc.Samples = append(auc.Samples, promserver.Sample{T: t, V: 0.84 + 0.01*math.Sin(k/9)})
			psi.Samples = append(psi.Samples, promserver.Sample{T: t, V: 0.05 + 0.02*math.Sin(k/13)})
			miss.Samples = append(miss.Samples, promserver.Sample{T: t, V: 0.01 + 0.005*math.Sin(k/7)})
		}
		out = append(out, auc, psi, miss)
	}
	return out
}

// createFleet makes the lines, their Deployments and their histories, with
// sixteen writers at once.
func createFleet(ctx context.Context, ns string, n, shared int) error {
	var wg sync.WaitGroup
	errs := make(chan error, 16)
	work := make(chan int)
	for range 16 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range work {
				if err := createFleetLine(ctx, ns, i, i < shared); err != nil {
					select {
					case errs <- err:
					default:
					}
				}
			}
		}()
	}
	for i := range n {
		work <- i
	}
	close(work)
	wg.Wait()
	select {
	case err := <-errs:
		return err
	default:
		return nil
	}
}

func createFleetLine(ctx context.Context, ns string, i int, shared bool) error {
	name := fleetLineName(i)
	dep := servingDeployment(ns, name+"-scorer", "scorer")
	if err := k8s.Create(ctx, dep); err != nil && !apierrors.IsAlreadyExists(err) {
		return fmt.Errorf("create Deployment of %s: %w", name, err)
	}
	line := scaleLine(ns, name, shared)
	if err := k8s.Create(ctx, line); err != nil && !apierrors.IsAlreadyExists(err) {
		return fmt.Errorf("create line %s: %w", name, err)
	}
	var created v1alpha1.ModelLine
	if err := k8s.Get(ctx, client.ObjectKey{Namespace: ns, Name: name}, &created); err != nil {
		return fmt.Errorf("read line %s: %w", name, err)
	}
	for k := range 10 {
		// Adopted already, as the versions of a line that has run for a
		// while are: a fresh start of the manager does not adopt them again.
		// All but the newest are labelled history, as the manager leaves
		// such a line (they bear on nothing: no promotion, no data window,
		// and v9 is the line's last outcome); a manager upgraded onto an
		// existing fleet labels them once, one metadata patch a version.
		var labels map[string]string
		if k < 9 {
			labels = map[string]string{v1alpha1.HistoryLabel: string(v1alpha1.PhaseArchived)}
		}
		v := &v1alpha1.ModelVersion{ObjectMeta: metav1.ObjectMeta{Namespace: ns, Name: fmt.Sprintf("%s-v%d", name, k), Labels: labels,
			OwnerReferences: []metav1.OwnerReference{*metav1.NewControllerRef(&created, v1alpha1.GroupVersion.WithKind("ModelLine"))}},
			Spec: v1alpha1.ModelVersionSpec{Line: name, ArtifactURI: fmt.Sprintf("s3://larkspur-models/%s/v%d", name, k), Source: v1alpha1.SourceImported}}
		if err := k8s.Create(ctx, v); err != nil {
			if apierrors.IsAlreadyExists(err) {
				continue
			}
			return fmt.Errorf("create version %s: %w", v.Name, err)
		}
		v.Status.Phase = v1alpha1.PhaseArchived
		v.Status.Reason = "Replaced"
		v.Status.Message = "served before; replaced by a newer version (synthetic history)"
		v.Status.Gate = fleetGateResult(k)
		if err := k8s.Status().Update(ctx, v); err != nil {
			return fmt.Errorf("write status of version %s: %w", v.Name, err)
		}
	}
	return nil
}

// fleetGateResult is a history version's gate result as a gate with a
// few metrics judged on a few depots leaves it: eight criteria with their
// figures and messages, the bulk of a gated version's status.
func fleetGateResult(k int) *v1alpha1.GateResult {
	g := &v1alpha1.GateResult{Verdict: v1alpha1.GatePassed, Reason: "CriteriaMet", Rows: 20000,
		Message: "all 8 criteria met on 20000 rows"}
	if k > 0 {
		g.BaselineVersion = fmt.Sprintf("v%d", k-1)
	}
	for _, metric := range []string{"roc_auc", "recall_at_precision_0.8"} {
		for _, depot := range []string{"", "depot=north", "depot=harbour", "depot=east"} {
			g.Criteria = append(g.Criteria, v1alpha1.CriterionResult{Metric: metric, Segment: depot, Passed: true,
				Candidate: "0.8412", Baseline: "0.8377", DeltaLow: "-0.0021", DeltaHigh: "0.0093",
				Message: fmt.Sprintf("%s %s: candidate 0.8412, baseline 0.8377, difference 95%% CI [-0.0021, 0.0093] within the allowed loss of 0.01 (synthetic history)", metric, depot)})
		}
	}
	return g
}

// scaleLine is a fleet line: on the shared templates, or on queries of its
// own that name it.
func scaleLine(ns, name string, shared bool) *unstructured.Unstructured {
	job := map[string]any{"spec": map[string]any{"template": map[string]any{"spec": map[string]any{
		"restartPolicy": "Never", "containers": []any{map[string]any{"name": "c", "image": "registry.larkspur.example/x:1"}}}}}}
	sel := `namespace="{{.Namespace}}", line="{{.Line}}"`
	if !shared {
		sel = fmt.Sprintf(`namespace=%q, line=%q`, ns, name)
	}
	trig := func(tname, query string, key string, v float64) map[string]any {
		return map[string]any{"name": tname, "query": query, key: v, "forSeconds": int64(1800), "everySeconds": int64(60)}
	}
	return &unstructured.Unstructured{Object: map[string]any{
		"apiVersion": "plumbline.dev/v1alpha1", "kind": "ModelLine",
		"metadata": map[string]any{"namespace": ns, "name": name},
		"spec": map[string]any{
			"serving":  map[string]any{"deploymentName": name + "-scorer", "containerName": "scorer"},
			"training": map[string]any{"artifactURI": "s3://m/{{.Version}}", "jobTemplate": job},
			"gate":     map[string]any{"jobTemplate": job, "criteria": []any{map[string]any{"metric": "roc_auc", "minimum": 0.8}}},
			"triggers": []any{
				trig("auc-drop", "min(fleet_late_risk_roc_auc{"+sel+"})", "below", 0.7),
				trig("depot-shift", "max(fleet_feature_psi{"+sel+"})", "above", 0.25),
				trig("address-missing", "fleet_feature_missing_ratio{"+sel+"}", "above", 0.05),
			},
		},
	}}
}

func orDefault(s string) string {
	if s == "" {
		return "default"
	}
	return s
}
