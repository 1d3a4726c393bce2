package integration

import (
	"context"
	"fmt"
	"testing"
	"time"

	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// countJobs counts the namespace's Jobs by role.
func countJobs(t *testing.T, ns string) map[string]int {
	t.Helper()
	out := map[string]int{}
	for _, j := range lineJobs(t, ns) {
		out[j.Labels[v1alpha1.RoleLabel]]++
	}
	return out
}

// The manager is stopped and a new one started between every pair of steps,
// as a crash and a rescheduled Pod would do. Each step happens once: one
// training Job, one evaluation Job, one patch of the Deployment, one
// promotion.
func TestRestartBetweenSteps(t *testing.T) {
	ns := "restarts"
	key := liveLine(t, ns, nil)
	restartManager(t)
	gen := deployment(t, ns).Generation

	requestRetrain(t, key, "restart-test")
	restartManager(t)
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseTraining)
	restartManager(t)
	settle()
	if n := countJobs(t, ns); n["train"] != 1 || n["gate"] != 0 {
		t.Fatalf("jobs after restarts in training: %v", n)
	}

	succeedJob(t, ns, "late-risk-v1-train", "")
	restartManager(t)
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseEvaluating)
	restartManager(t)
	settle()
	if n := countJobs(t, ns); n["train"] != 1 || n["gate"] != 1 {
		t.Fatalf("jobs after restarts in evaluation: %v", n)
	}

	succeedJob(t, ns, "late-risk-v1-gate", encode(t, passingReport()))
	restartManager(t)
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhasePromoting)
	deploymentGeneration(t, ns, scorer, gen+1)
	restartManager(t)
	settle()
	if g := deployment(t, ns).Generation; g != gen+1 {
		t.Fatalf("Deployment generation %d after restarts in the rollout, want one patch (%d)", g, gen+1)
	}

	rollOut(t, ns, scorer)
	restartManager(t)
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseLive)
	restartManager(t)
	settle()
	v1 := getVersion(t, ns, "late-risk-v1")
	line := getLine(t, key)
	if line.Status.LiveVersion != "late-risk-v1" || line.Status.PreviousVersion != initial || getVersion(t, ns, initial).Status.Phase != v1alpha1.PhaseArchived {
		t.Errorf("after the promotion: live %s previous %s", line.Status.LiveVersion, line.Status.PreviousVersion)
	}
	if g := deployment(t, ns).Generation; g != gen+1 {
		t.Errorf("Deployment generation %d, want %d", g, gen+1)
	}
	if got := metricValue(t, "plumbline_promotions_total", map[string]string{"namespace": ns}); got > 2 {
		t.Errorf("promotions counted %v times", got)
	}
	var versions v1alpha1.ModelVersionList
	if err := k8s.List(context.Background(), &versions, client.InNamespace(ns)); err != nil {
		t.Fatal(err)
	}
	if len(versions.Items) != 3 {
		t.Errorf("%d versions, want v0, v1 and the rules", len(versions.Items))
	}
	// The promotion time is the one recorded once, not rewritten by a later
	// pass.
	promoted := v1.Status.PromotedTime
	clk.SetTime(clk.Now().Add(time.Hour))
	restartManager(t)
	settle()
	if v := getVersion(t, ns, "late-risk-v1"); !v.Status.PromotedTime.Equal(promoted) {
		t.Errorf("promotedTime moved from %v to %v", promoted, v.Status.PromotedTime)
	}
}

// A pass that created the training Job and died before recording it: the
// next manager finds the Job under its deterministic name, adopts it with
// the data window it was created with, and creates no second one. A Job of
// that name that belongs to something else is not taken over.
func TestAdoptsJobCreatedBeforeACrash(t *testing.T) {
	ctx := context.Background()
	ns := "adopt-job"
	liveLine(t, ns, nil)

	if err := stopManager(); err != nil {
		t.Fatal(err)
	}
	defer func() {
		if running.cancel == nil {
			if err := startManager(); err != nil {
				t.Fatal(err)
			}
		}
	}()
	// A person's Trained version, numbered by hand, and the Job a crashed
	// pass made for it.
	v := &v1alpha1.ModelVersion{
		ObjectMeta: metav1.ObjectMeta{Namespace: ns, Name: "late-risk-v5", Labels: map[string]string{"plumbline.dev/number": "5"}},
		Spec:       v1alpha1.ModelVersionSpec{Line: lineName, Source: v1alpha1.SourceTrained, Cause: v1alpha1.ReasonManual, ArtifactURI: trainPrefix + "5"},
	}
	if err := k8s.Create(ctx, v); err != nil {
		t.Fatal(err)
	}
	windowEnd := "2026-10-30T02:30:00Z"
	job := &batchv1.Job{
		ObjectMeta: metav1.ObjectMeta{
			Namespace: ns, Name: "late-risk-v5-train",
			Labels:          map[string]string{v1alpha1.LineLabel: lineName, v1alpha1.VersionLabel: v.Name, v1alpha1.RoleLabel: "train"},
			Annotations:     map[string]string{"plumbline.dev/data-from": "", "plumbline.dev/data-to": windowEnd},
			OwnerReferences: []metav1.OwnerReference{*metav1.NewControllerRef(v, v1alpha1.GroupVersion.WithKind("ModelVersion"))},
		},
		Spec: batchv1.JobSpec{Template: corev1.PodTemplateSpec{Spec: corev1.PodSpec{
			RestartPolicy: corev1.RestartPolicyNever,
			Containers:    []corev1.Container{{Name: "train", Image: "registry.larkspur.example/late-risk-trainer:1.4"}},
		}}},
	}
	if err := k8s.Create(ctx, job); err != nil {
		t.Fatal(err)
	}
	uid := job.UID

	// A second version whose Job name is taken by a stranger's Job.
	stranger := &batchv1.Job{
		ObjectMeta: metav1.ObjectMeta{Namespace: ns, Name: "late-risk-v6-train"},
		Spec: batchv1.JobSpec{Template: corev1.PodTemplateSpec{Spec: corev1.PodSpec{
			RestartPolicy: corev1.RestartPolicyNever,
			Containers:    []corev1.Container{{Name: "report", Image: "registry.larkspur.example/weekly-report:3"}},
		}}},
	}
	if err := k8s.Create(ctx, stranger); err != nil {
		t.Fatal(err)
	}
	v6 := &v1alpha1.ModelVersion{
		ObjectMeta: metav1.ObjectMeta{Namespace: ns, Name: "late-risk-v6", Labels: map[string]string{"plumbline.dev/number": "6"}},
		Spec:       v1alpha1.ModelVersionSpec{Line: lineName, Source: v1alpha1.SourceTrained, Cause: v1alpha1.ReasonManual, ArtifactURI: trainPrefix + "6"},
	}
	if err := k8s.Create(ctx, v6); err != nil {
		t.Fatal(err)
	}

	if err := startManager(); err != nil {
		t.Fatal(err)
	}
	got := waitPhase(t, ns, "late-risk-v5", v1alpha1.PhaseTraining)
	if got.Status.TrainingJob != job.Name || got.Status.DataTo == nil || got.Status.DataTo.UTC().Format(time.RFC3339) != windowEnd {
		t.Errorf("adopted status: job %q, window to %v (want %s, read back from the Job)", got.Status.TrainingJob, got.Status.DataTo, windowEnd)
	}
	var after batchv1.Job
	if err := k8s.Get(ctx, client.ObjectKeyFromObject(job), &after); err != nil {
		t.Fatal(err)
	}
	if after.UID != uid {
		t.Errorf("the Job was replaced (uid %s, was %s)", after.UID, uid)
	}
	if n := countJobs(t, ns); n["train"] != 1 {
		t.Errorf("training Jobs: %v", n)
	}
	// v5 trains and is judged; then v6 finds its Job name taken.
	succeedJob(t, ns, job.Name, "")
	waitPhase(t, ns, "late-risk-v5", v1alpha1.PhaseEvaluating)
	succeedJob(t, ns, "late-risk-v5-gate", encode(t, passingReport()))
	waitPhase(t, ns, "late-risk-v5", v1alpha1.PhasePromoting)
	rollOutTo(t, ns, "late-risk-v5")
	waitPhase(t, ns, "late-risk-v5", v1alpha1.PhaseLive)
	failed := waitPhase(t, ns, "late-risk-v6", v1alpha1.PhaseFailed)
	if failed.Status.Reason != "JobNameTaken" {
		t.Errorf("v6 reason %q", failed.Status.Reason)
	}
	mustContain(t, "message", failed.Status.Message, "late-risk-v6-train", "does not belong to this version")
	var still batchv1.Job
	if err := k8s.Get(ctx, client.ObjectKeyFromObject(stranger), &still); err != nil || len(still.OwnerReferences) != 0 {
		t.Errorf("the stranger's Job was touched: %v %v", err, still.OwnerReferences)
	}
	if fmt.Sprint(countJobs(t, ns)) != fmt.Sprint(map[string]int{"": 1, "gate": 1, "train": 1}) {
		t.Errorf("jobs %v", countJobs(t, ns))
	}
}
