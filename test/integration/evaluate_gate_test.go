package integration

import (
	"bytes"
	"context"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/parquet-go/parquet-go"
	batchv1 "k8s.io/api/batch/v1"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/tools/evaluate"
)

type prediction struct {
	ParcelID  string  `parquet:"parcel_id"`
	Depot     string  `parquet:"depot"`
	WasLate   int64   `parquet:"was_late"`
	Candidate float64 `parquet:"candidate_score"`
	Baseline  float64 `parquet:"baseline_score"`
	MustPass  bool    `parquet:"must_pass"`
}

// writePredictions writes what the team's scorer would write on the golden
// set: synthetic late-delivery labels for 6,000 parcels over four depots,
// a candidate that separates late parcels well and a weaker baseline. With
// swap the two models trade places.
func writePredictions(t *testing.T, path string, swap bool) {
	t.Helper()
	rng := rand.New(rand.NewPCG(21, 22))
	depots := []string{"north", "harbour", "fenwick", "lakeside"}
	var rows []prediction
	for i := 0; i < 6000; i++ {
		y := int64(0)
		if rng.Float64() < 0.3 {
			y = 1
		}
		z := rng.NormFloat64() + 2.6*float64(y) - 1.8
		zb := 0.5*z + 0.9*rng.NormFloat64() - 0.2
		c, b := 1/(1+math.Exp(-z)), 1/(1+math.Exp(-zb))
		if swap {
			c, b = b, c
		}
		right := (c >= 0.5) == (y == 1)
		rows = append(rows, prediction{ParcelID: "LK-" + string(rune('A'+i%26)) + strings.Repeat("x", i%3), Depot: depots[i%4], WasLate: y,
			Candidate: c, Baseline: b, MustPass: i%150 == 0 && right})
	}
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	w := parquet.NewGenericWriter[prediction](f)
	if _, err := w.Write(rows); err != nil {
		t.Fatal(err)
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	f.Close()
}

// runEvaluationJob plays the kubelet for a gate Job whose last container
// is plumbline evaluate: it runs that container's command in this process
// with the container's environment (as the controller set it) and the
// input mapped to a local file, then finishes the Job with the container's
// termination message.
func runEvaluationJob(t *testing.T, ns, name, predictions string) string {
	t.Helper()
	job := waitJob(t, ns, name)
	spec := job.Spec.Template.Spec
	last := spec.Containers[len(spec.Containers)-1]
	if len(last.Args) == 0 || last.Args[0] != "evaluate" {
		t.Fatalf("the gate Job's last container is not plumbline evaluate: %v", last.Args)
	}
	env := map[string]string{}
	for _, e := range last.Env {
		env[e.Name] = e.Value
	}
	term := filepath.Join(t.TempDir(), "termination-log")
	var args []string
	for _, a := range last.Args[1:] {
		if strings.HasPrefix(a, "--input=") {
			a = "--input=" + predictions
		}
		args = append(args, a)
	}
	args = append(args, "--termination-file", term, "--resamples", "300")
	var stdout, stderr bytes.Buffer
	if err := evaluate.Command(args, func(k string) string { return env[k] }, &stdout, &stderr); err != nil {
		t.Fatalf("plumbline evaluate: %v\n%s", err, stderr.String())
	}
	finishWithReport(t, ns, name, term)
	return stdout.String()
}

// A gate Job whose last container is the plumbline binary: the controller
// sets what its criteria need in the container's environment, plumbline
// evaluate measures the predictions and writes the gate report, and the
// controller judges it: a better candidate passes, a worse one is rejected.
func TestGateJobRunsPlumblineEvaluate(t *testing.T) {
	ns := "evaluate-gate"
	key := liveLine(t, ns, nil)
	dir := t.TempDir()
	better, worse := filepath.Join(dir, "better.parquet"), filepath.Join(dir, "worse.parquet")
	writePredictions(t, better, false)
	writePredictions(t, worse, true)

	requestRetrain(t, key, "evaluate-1")
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseTraining)
	succeedJob(t, ns, "late-risk-v1-train", "")
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseEvaluating)
	var job batchv1.Job
	if err := k8s.Get(context.Background(), client.ObjectKey{Namespace: ns, Name: "late-risk-v1-gate"}, &job); err != nil {
		t.Fatal(err)
	}
	env := envOf(job.Spec.Template.Spec.Containers[0])
	if env["PLUMBLINE_GATE_METRICS"] != "roc_auc,log_loss,recall" || env["PLUMBLINE_GATE_SEGMENTS"] != "*" || env["PLUMBLINE_GATE_CONFIDENCE"] != "0.95" {
		t.Errorf("gate env %v", env)
	}
	out := runEvaluationJob(t, ns, "late-risk-v1-gate", better)
	v1 := waitPhase(t, ns, "late-risk-v1", v1alpha1.PhasePromoting)
	g := v1.Status.Gate
	if g.Verdict != v1alpha1.GatePassed || len(g.Criteria) != 7 || g.Rows != 6000 {
		t.Errorf("gate %+v\n%s", g, out)
	}
	rollOutTo(t, ns, "late-risk-v1")
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseLive)

	requestRetrain(t, key, "evaluate-2")
	waitPhase(t, ns, "late-risk-v2", v1alpha1.PhaseTraining)
	succeedJob(t, ns, "late-risk-v2-train", "")
	waitPhase(t, ns, "late-risk-v2", v1alpha1.PhaseEvaluating)
	runEvaluationJob(t, ns, "late-risk-v2-gate", worse)
	v2 := waitPhase(t, ns, "late-risk-v2", v1alpha1.PhaseRejected)
	if v2.Status.Gate.Reason != "CriteriaNotMet" {
		t.Errorf("gate %+v", v2.Status.Gate)
	}
	mustContain(t, "gate message", v2.Status.Gate.Message, "roc_auc")
}
