package integration

import (
	"bytes"
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	batchv1 "k8s.io/api/batch/v1"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/testenv/standin"
	"plumbline.dev/plumbline/internal/tools/datacheck"
)

// batches are synthetic Larkspur delivery batches for the check Job: the
// reference the live model learned from, a current batch like it, one from
// a broken address feed (a fifth of postcodes missing), and one after the
// Fenwick depot opened (a new depot, longer routes).
type batches struct{ reference, current, broken, drifted string }

func writeBatches(t *testing.T) batches {
	t.Helper()
	dir := t.TempDir()
	depots := []string{"Ashby", "Brindle", "Corran", "Dunmore"}
	gen := func(name string, seed uint64, broken, drifted bool) string {
		rng := rand.New(rand.NewPCG(seed, 3))
		var b strings.Builder
		b.WriteString("parcel_id,distance_km,depot,postcode,promised_hours\n")
		for i := 0; i < 3000; i++ {
			depot := depots[rng.IntN(4)]
			dist := math.Exp(2.5 + 0.6*rng.NormFloat64())
			if drifted && rng.Float64() < 0.3 {
				depot, dist = "Fenwick", dist*1.6
			}
			pc := fmt.Sprintf("LP%d", 1+rng.IntN(40))
			if broken && rng.Float64() < 0.2 {
				pc = ""
			}
			fmt.Fprintf(&b, "%s-%05d,%.2f,%s,%s,%d\n", name, i, dist, depot, pc, 24*(1+rng.IntN(3)))
		}
		p := filepath.Join(dir, name+".csv")
		if err := os.WriteFile(p, []byte(b.String()), 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	return batches{gen("reference", 1, false, false), gen("current", 2, false, false), gen("broken", 3, true, false), gen("drifted", 4, false, true)}
}

// checkJobTemplate runs plumbline datacheck on the batches a real Job would
// mount.
func checkJobTemplate() map[string]any {
	return map[string]any{"spec": map[string]any{"backoffLimit": int64(0), "template": map[string]any{"spec": map[string]any{
		"containers": []any{map[string]any{"name": "datacheck", "image": "ghcr.io/larkspur/plumbline:dev",
			"args": []any{"datacheck", "--reference=/data/reference.csv", "--current=/data/current.csv", "--id=parcel_id"}}},
	}}}}
}

// runCheckJob plays the kubelet for a check Job whose container is
// plumbline datacheck: it runs the command in this process with the batch
// files mapped to local ones, then finishes the Job with the termination
// message the command wrote.
func runCheckJob(t *testing.T, ns, name, reference, current string) {
	t.Helper()
	job := waitJob(t, ns, name)
	spec := job.Spec.Template.Spec
	last := spec.Containers[len(spec.Containers)-1]
	if len(last.Args) == 0 || last.Args[0] != "datacheck" {
		t.Fatalf("the check Job's container is not plumbline datacheck: %v", last.Args)
	}
	term := filepath.Join(t.TempDir(), "termination-log")
	var args []string
	for _, a := range last.Args[1:] {
		switch {
		case strings.HasPrefix(a, "--reference="):
			a = "--reference=" + reference
		case strings.HasPrefix(a, "--current="):
			a = "--current=" + current
		}
		args = append(args, a)
	}
	args = append(args, "--termination-file", term)
	var stdout, stderr bytes.Buffer
	if err := datacheck.Command(args, &stdout, &stderr); err != nil {
		t.Fatalf("plumbline datacheck: %v\n%s", err, stderr.String())
	}
	finishWithReport(t, ns, name, term)
}

// finishWithReport succeeds a Job whose container wrote its report to a
// termination file, the Pod leaving that as its message.
func finishWithReport(t *testing.T, ns, name, term string) {
	t.Helper()
	msg, err := os.ReadFile(term)
	if err != nil {
		t.Fatal(err)
	}
	if err := standin.SucceedJob(context.Background(), k8s, ns, name, string(msg)); err != nil {
		t.Fatal(err)
	}
}

func waitLastCheck(t *testing.T, key client.ObjectKey, ok func(*v1alpha1.CheckRunStatus) bool) *v1alpha1.CheckRunStatus {
	t.Helper()
	var st *v1alpha1.CheckRunStatus
	eventually(t, waitFor, func() error {
		st = getLine(t, key).Status.LastCheck
		if st == nil || !ok(st) {
			return fmt.Errorf("last check %+v", st)
		}
		return nil
	})
	return st
}

func checkJobsOf(t *testing.T, ns string) []string {
	t.Helper()
	var list batchv1.JobList
	if err := k8s.List(context.Background(), &list, client.InNamespace(ns), client.MatchingLabels{v1alpha1.RoleLabel: "check"}); err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, j := range list.Items {
		if j.DeletionTimestamp == nil {
			names = append(names, j.Name)
		}
	}
	return names
}

// A person's retrain request with a check Job: the Job runs first (told the
// window a retrain would train on and the live version's), the start waits
// for its report, broken data is refused, and a second request on sound
// data starts the retrain. The rows the Job saw count as fresh data.
func TestCheckJobRefusesBrokenData(t *testing.T) {
	ns := "check-job"
	b := writeBatches(t)
	key := liveLine(t, ns, func(o *unstructured.Unstructured) {
		mustSet(t, o, "spec.checks", map[string]any{"jobTemplate": checkJobTemplate(), "freshData": map[string]any{"atLeast": 1000.0}})
	})
	requestRetrain(t, key, "check-1")
	job := waitJob(t, ns, "late-risk-check-1")
	env := envOf(job.Spec.Template.Spec.Containers[0])
	if env["PLUMBLINE_LINE"] != "late-risk" || env["PLUMBLINE_REASON"] != "Manual" || env["PLUMBLINE_LIVE_VERSION"] != initial || env["PLUMBLINE_DATA_TO"] == "" {
		t.Errorf("check Job env %v", env)
	}
	if !metav1.IsControlledBy(job, getLine(t, key)) {
		t.Errorf("check Job owners %+v, want the line", job.OwnerReferences)
	}
	waitLineCondition(t, key, v1alpha1.ConditionBlocked, metav1.ConditionUnknown, "CheckRunning")
	if n := len(trainedVersions(t, ns)); n != 0 {
		t.Fatalf("%d versions before the check finished", n)
	}

	runCheckJob(t, ns, "late-risk-check-1", b.reference, b.broken)
	line := waitLineCondition(t, key, v1alpha1.ConditionBlocked, metav1.ConditionTrue, "DataQualityIssue")
	mustContain(t, "Blocked message", conditionMessage(line, v1alpha1.ConditionBlocked), "check Job late-risk-check-1", "missing postcode", "broken.csv:", "fix the data first")
	st := waitLastCheck(t, key, func(s *v1alpha1.CheckRunStatus) bool { return s.Used })
	if st.DataQuality != v1alpha1.CheckFailed || st.Rows == nil || *st.Rows != 3000 || st.Reason != "Manual" {
		t.Errorf("last check %+v", st)
	}
	waitEvent(t, ns, lineName, "CheckFinished")
	waitEvent(t, ns, lineName, "RetrainBlocked")
	if n := metricSum(t, "plumbline_check_runs_total", map[string]string{"namespace": ns, "data_quality": "Failed", "drift": "NotDetected"}); n != 1 {
		t.Errorf("check runs counted as failed: %v, want 1", n)
	}
	if got := getLine(t, key).Status.LastRetrainRequest; got != "check-1" {
		t.Errorf("the refused request should be settled, last request %q", got)
	}
	if n := len(trainedVersions(t, ns)); n != 0 {
		t.Fatalf("%d versions from broken data", n)
	}

	// Asking again runs the Job again; the data is sound now.
	requestRetrain(t, key, "check-2")
	runCheckJob(t, ns, "late-risk-check-2", b.reference, b.current)
	v := waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseTraining)
	if v.Spec.Cause != v1alpha1.ReasonManual {
		t.Errorf("reason %q", v.Spec.Cause)
	}
	waitLineCondition(t, key, v1alpha1.ConditionBlocked, metav1.ConditionFalse, "ChecksPassed")
	st = waitLastCheck(t, key, func(s *v1alpha1.CheckRunStatus) bool { return s.Number == 2 && s.Used })
	if st.DataQuality != v1alpha1.CheckOK {
		t.Errorf("last check %+v", st)
	}
}

// A check Job that fails, or leaves a report that cannot be used, never
// starts or refuses anything: the start waits and the Job runs again. Older
// check Jobs are deleted, the newest three kept.
func TestCheckJobFailuresWait(t *testing.T) {
	ns := "check-job-fails"
	b := writeBatches(t)
	key := liveLine(t, ns, func(o *unstructured.Unstructured) {
		mustSet(t, o, "spec.checks", map[string]any{"jobTemplate": checkJobTemplate()})
	})
	clk.SetTime(hm(1, 0))
	requestRetrain(t, key, "fails-1")
	failJob(t, ns, "late-risk-check-1", "BackoffLimitExceeded", "Job has reached the specified backoff limit", "cannot open /data/current.csv")
	line := waitLineCondition(t, key, v1alpha1.ConditionBlocked, metav1.ConditionUnknown, "ChecksUnknown")
	mustContain(t, "Blocked message", conditionMessage(line, v1alpha1.ConditionBlocked), "CheckJobFailed", "cannot open /data/current.csv")
	waitEvent(t, ns, lineName, "CheckUnusable")

	// The retry, a minute on, runs the Job again; its report is garbage.
	retry := func(at time.Time, job string) {
		clk.SetTime(at)
		nudge(t, key, at)
		waitJob(t, ns, job)
	}
	retry(hm(1, 1), "late-risk-check-2")
	succeedJob(t, ns, "late-risk-check-2", "all good, trust me")
	waitLastCheck(t, key, func(s *v1alpha1.CheckRunStatus) bool {
		return s.Number == 2 && s.DataQuality == v1alpha1.CheckUnknown && strings.Contains(s.Message, "CheckReportMalformed")
	})
	retry(hm(1, 2), "late-risk-check-3")
	succeedJob(t, ns, "late-risk-check-3", "")
	waitLastCheck(t, key, func(s *v1alpha1.CheckRunStatus) bool {
		return s.Number == 3 && strings.Contains(s.Message, "CheckReportMissing")
	})
	if n := len(trainedVersions(t, ns)); n != 0 {
		t.Fatalf("%d versions started on unusable checks", n)
	}
	if got := getLine(t, key).Status.LastRetrainRequest; got == "fails-1" {
		t.Error("the request was settled on unusable checks")
	}

	retry(hm(1, 3), "late-risk-check-4")
	runCheckJob(t, ns, "late-risk-check-4", b.reference, b.current)
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseTraining)
	eventually(t, waitFor, func() error {
		var j batchv1.Job
		err := k8s.Get(context.Background(), client.ObjectKey{Namespace: ns, Name: "late-risk-check-1"}, &j)
		if apierrors.IsNotFound(err) || err == nil && j.DeletionTimestamp != nil {
			return nil
		}
		return fmt.Errorf("the oldest check Job is still there (%v)", err)
	})
	if got := strings.Join(checkJobsOf(t, ns), " "); got != "late-risk-check-2 late-risk-check-3 late-risk-check-4" {
		t.Errorf("check Jobs kept: %s", got)
	}
}

// On a trigger, the check Job's drift answer joins the PromQL drift checks:
// with PromQL seeing no drift and the Job none either, the drop needs a
// review, and the answer holds for the hour without a Job per evaluation;
// later, the Job finds the new depot and the retrain starts.
func TestCheckJobDriftOnTrigger(t *testing.T) {
	b := writeBatches(t)
	key := watchedLine(t, "check-drift", func(o *unstructured.Unstructured) {
		checks, _, _ := unstructured.NestedMap(o.Object, "spec", "checks")
		checks["jobTemplate"] = checkJobTemplate()
		mustSet(t, o, "spec.checks", checks)
	})
	stateAt(t, key, hm(4, 0), v1alpha1.TriggerFiring)
	waitLineCondition(t, key, v1alpha1.ConditionBlocked, metav1.ConditionUnknown, "CheckRunning")
	runCheckJob(t, key.Namespace, "late-risk-check-1", b.reference, b.current)
	line := waitLineCondition(t, key, v1alpha1.ConditionNeedsReview, metav1.ConditionTrue, "DegradedWithoutDrift")
	mustContain(t, "NeedsReview message", conditionMessage(line, v1alpha1.ConditionNeedsReview), "drift check depot-shift is 0.05", "check Job late-risk-check-1", "no drift")

	// Still firing a few minutes on: the same answer, no second Job.
	stateAt(t, key, hm(4, 5), v1alpha1.TriggerFiring)
	stateAt(t, key, hm(4, 30), v1alpha1.TriggerFiring)
	settle()
	if got := checkJobsOf(t, key.Namespace); len(got) != 1 {
		t.Errorf("check Jobs %v while the report is fresh, want only the first", got)
	}
	if n := len(trainedVersions(t, key.Namespace)); n != 0 {
		t.Fatalf("%d retrains without drift", n)
	}

	// Past the hour the Job runs again, and now the depot has opened.
	stateAt(t, key, hm(5, 10), v1alpha1.TriggerFiring)
	runCheckJob(t, key.Namespace, "late-risk-check-2", b.reference, b.drifted)
	v := waitPhase(t, key.Namespace, "late-risk-v1", v1alpha1.PhaseTraining)
	if v.Spec.Cause != "Trigger/auc-drop" {
		t.Errorf("reason %q", v.Spec.Cause)
	}
	st := waitLastCheck(t, key, func(s *v1alpha1.CheckRunStatus) bool { return s.Number == 2 && s.Used })
	if st.Drift != v1alpha1.CheckDetected || st.DataQuality != v1alpha1.CheckOK {
		t.Errorf("last check %+v", st)
	}
	mustContain(t, "check message", st.Message, "drift detected", "depot")
}

func conditionMessage(line *v1alpha1.ModelLine, typ string) string {
	for _, c := range line.Status.Conditions {
		if c.Type == typ {
			return c.Message
		}
	}
	return ""
}
