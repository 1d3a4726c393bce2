package integration

import (
	"context"
	"fmt"
	"syscall"
	"testing"
	"time"

	apierrors "k8s.io/apimachinery/pkg/api/errors"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/controllers/modelline"
	"plumbline.dev/plumbline/internal/engine/clock"
	"plumbline.dev/plumbline/internal/manager"
)

const (
	fleetLines = 500
	fleetSpeed = 10 // the benchmark's clock runs ten times faster than real time
)

// BenchmarkTriggerFleet runs the manager over 500 lines with 3 triggers
// each, judged every minute against the real Prometheus, on a clock that
// runs ten times faster than real time. One iteration is one minute of that
// clock. It reports the queries and passes per minute (the design asks for
// one range query per trigger per evaluation: 1,500 a minute) and the
// process CPU per pass. The triggers watch healthy series, so nothing fires.
//
//	go test ./test/integration -run '^$' -bench TriggerFleet -benchtime 5x
func BenchmarkTriggerFleet(b *testing.B) {
	if prometheusURL == "" {
		b.Skip("prometheus is not installed")
	}
	ctx := context.Background()
	ns := "fleet"
	withoutSuiteManager(b)
	createNamespaceB(b, ns)
	// The testing package calls a benchmark more than once (b.N = 1 first):
	// what is there already is kept.
	if err := k8s.Create(ctx, larkspurDeployment(ns)); err != nil && !apierrors.IsAlreadyExists(err) {
		b.Fatal(err)
	}
	for i := 0; i < fleetLines; i++ {
		if err := k8s.Create(ctx, fleetLine(ns, i)); err != nil && !apierrors.IsAlreadyExists(err) {
			b.Fatal(err)
		}
	}
	defer func() {
		_ = k8s.DeleteAllOf(ctx, &v1alpha1.ModelLine{}, client.InNamespace(ns))
	}()

	mctx, cancel := context.WithCancel(ctx)
	clk := clock.NewScaled(hm(2, 0), fleetSpeed)
	mgr, err := manager.New(mctx, managerConfig, manager.Options{MetricsAddr: "0", ProbeAddr: "0", Clock: clk,
		AllowSecondManager: true, PrometheusURL: prometheusURL, MaxConcurrentReconciles: 4,
		// It counts with the per-line counters.
		LineMetrics: modelline.LineMetricsAll})
	if err != nil {
		cancel()
		b.Fatal(err)
	}
	done := make(chan error, 1)
	go func() { done <- mgr.Start(mctx) }()
	defer func() {
		cancel()
		<-done
	}()

	labels := map[string]string{"namespace": ns}
	// Warm up: every line judged once by this manager.
	warm := metricSumB(b, "plumbline_trigger_evaluations_total", labels) + 3*fleetLines
	deadline := time.Now().Add(2 * time.Minute)
	for metricSumB(b, "plumbline_trigger_evaluations_total", labels) < warm {
		if time.Now().After(deadline) {
			b.Fatalf("only %v evaluations after two minutes", metricSumB(b, "plumbline_trigger_evaluations_total", labels))
		}
		time.Sleep(100 * time.Millisecond)
	}

	queries0 := metricSumB(b, "plumbline_prometheus_queries_total", nil)
	evals0 := metricSumB(b, "plumbline_trigger_evaluations_total", labels)
	passes0 := metricSumB(b, "plumbline_line_reconciles_total", labels)
	cpu0 := cpuTime()
	start := time.Now()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		time.Sleep(clk.Delay(time.Minute))
	}
	b.StopTimer()
	minutes := float64(time.Since(start)) * fleetSpeed / float64(time.Minute)
	queries := metricSumB(b, "plumbline_prometheus_queries_total", nil) - queries0
	evals := metricSumB(b, "plumbline_trigger_evaluations_total", labels) - evals0
	passes := metricSumB(b, "plumbline_line_reconciles_total", labels) - passes0
	cpu := cpuTime() - cpu0
	b.ReportMetric(queries/minutes, "queries/min")
	b.ReportMetric(evals/minutes, "evaluations/min")
	b.ReportMetric(passes/minutes, "passes/min")
	if passes > 0 {
		b.ReportMetric(float64(cpu.Microseconds())/1000/passes, "cpu-ms/pass")
	}
	b.ReportMetric(float64(cpu.Microseconds())/1000/(float64(time.Since(start))/float64(time.Second)), "cpu-ms/s")
}

// withoutSuiteManager stops the suite's manager for a benchmark that runs
// its own, and starts it again once the benchmark has cleaned up.
func withoutSuiteManager(b *testing.B) {
	if err := stopManager(); err != nil {
		b.Fatal(err)
	}
	b.Cleanup(func() {
		if err := startManager(); err != nil {
			b.Error(err)
		}
	})
}

func createNamespaceB(b *testing.B, name string) {
	t := &testing.T{}
	createNamespace(t, name)
	if t.Failed() {
		b.Fatalf("create namespace %s", name)
	}
}

// fleetLine is a line with three triggers on healthy series.
func fleetLine(ns string, i int) *unstructured.Unstructured {
	job := map[string]any{"spec": map[string]any{"template": map[string]any{"spec": map[string]any{
		"restartPolicy": "Never", "containers": []any{map[string]any{"name": "c", "image": "registry.larkspur.example/x:1"}}}}}}
	trig := func(name, query string, key string, v float64) map[string]any {
		return map[string]any{"name": name, "query": query, key: v, "forSeconds": int64(3600), "everySeconds": int64(60)}
	}
	return &unstructured.Unstructured{Object: map[string]any{
		"apiVersion": "plumbline.dev/v1alpha1", "kind": "ModelLine",
		"metadata": map[string]any{"namespace": ns, "name": fmt.Sprintf("depot-%03d", i)},
		"spec": map[string]any{
			"serving":  map[string]any{"deploymentName": scorer, "containerName": "scorer"},
			"training": map[string]any{"artifactURI": "s3://m/{{.Version}}", "jobTemplate": job},
			"gate":     map[string]any{"jobTemplate": job, "criteria": []any{map[string]any{"metric": "roc_auc", "minimum": 0.8}}},
			"triggers": []any{
				trig("auc-drop", `larkspur_late_risk_roc_auc{scenario="scheduled"}`, "below", 0.78),
				trig("depot-shift", `max(larkspur_feature_psi{scenario="no-drift"})`, "above", 0.25),
				trig("address-missing", `larkspur_feature_missing_ratio{scenario="dip"}`, "above", 0.05),
			},
		},
	}}
}

func metricSumB(b *testing.B, name string, labels map[string]string) float64 {
	t := &testing.T{}
	v := metricSum(t, name, labels)
	if t.Failed() {
		b.Fatalf("read metric %s", name)
	}
	return v
}

func cpuTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
