package integration

import (
	"context"
	"fmt"
	"testing"
	"time"

	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// trainAndPass takes a version from Training through a passing gate.
func trainAndPass(t *testing.T, ns, name string) {
	t.Helper()
	waitPhase(t, ns, name, v1alpha1.PhaseTraining)
	succeedJob(t, ns, name+"-train", "")
	waitPhase(t, ns, name, v1alpha1.PhaseEvaluating)
	succeedJob(t, ns, name+"-gate", encode(t, passingReport()))
}

// retrainLive asks for a retrain at start and takes the version through
// training, a passing gate and a rollout that completes at live.
func retrainLive(t *testing.T, key client.ObjectKey, token, name string, start, live time.Time) {
	t.Helper()
	clk.SetTime(start)
	requestRetrain(t, key, token)
	trainAndPass(t, key.Namespace, name)
	waitPhase(t, key.Namespace, name, v1alpha1.PhasePromoting)
	clk.SetTime(live)
	rollOutTo(t, key.Namespace, name)
	waitPhase(t, key.Namespace, name, v1alpha1.PhaseLive)
}

// With Manual approval a candidate that passed the gate waits for a person;
// a request meanwhile is queued behind it; a rejection during training stops
// the training Job.
func TestManualApproval(t *testing.T) {
	ns := "manual"
	key := liveLine(t, ns, func(o *unstructured.Unstructured) { mustSet(t, o, "spec.gate.approval", "Manual") })

	requestRetrain(t, key, "first")
	trainAndPass(t, ns, "late-risk-v1")
	v1 := waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseAwaitingApproval)
	mustContain(t, "message", v1.Status.Message, "kubectl patch modelversion late-risk-v1", `"decision":"Approved"`)
	line := waitLineCondition(t, key, v1alpha1.ConditionAwaitingApproval, metav1.ConditionTrue, "WaitingForDecision")
	mustContain(t, "AwaitingApproval message", meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionAwaitingApproval).Message, "late-risk-v1")
	waitEvent(t, ns, lineName, "AwaitingApproval")
	settle()
	if _, v := served(t, ns); v != initial {
		t.Fatalf("promoted without approval: Deployment serves %s", v)
	}

	// A second request while v1 waits: queued, not started.
	requestRetrain(t, key, "second")
	v2 := waitPhase(t, ns, "late-risk-v2", v1alpha1.PhasePending)
	settle()
	if v2 = getVersion(t, ns, "late-risk-v2"); v2.Status.Phase != v1alpha1.PhasePending || v2.Status.TrainingJob != "" {
		t.Fatalf("queued version started: %+v", v2.Status)
	}
	mustContain(t, "Retraining message", meta.FindStatusCondition(getLine(t, key).Status.Conditions, v1alpha1.ConditionRetraining).Message, "1 more queued")

	// The person approves; v1 rolls out; then v2 starts.
	clk.SetTime(clk.Now().Add(15 * 60e9))
	decide(t, ns, "late-risk-v1", v1alpha1.DecisionApproved, "checked the north depot numbers")
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhasePromoting)
	v1 = getVersion(t, ns, "late-risk-v1")
	if v1.Status.DecisionTime == nil || !v1.Status.DecisionTime.Time.Equal(clk.Now().Truncate(1e9)) {
		t.Errorf("decision time %v, want the clock's %s", v1.Status.DecisionTime, clk.Now())
	}
	if err := expectCondition(v1.Status.Conditions, v1alpha1.ConditionApproved, metav1.ConditionTrue, "ApprovedByPerson"); err != nil {
		t.Error(err)
	}
	rollOutTo(t, ns, "late-risk-v1")
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseLive)
	waitLineCondition(t, key, v1alpha1.ConditionAwaitingApproval, metav1.ConditionFalse, "NothingWaiting")

	// v2 passes the gate and is rejected by the person.
	trainAndPass(t, ns, "late-risk-v2")
	waitPhase(t, ns, "late-risk-v2", v1alpha1.PhaseAwaitingApproval)
	decide(t, ns, "late-risk-v2", v1alpha1.DecisionRejected, "harbour depot recall looks off")
	v2 = waitPhase(t, ns, "late-risk-v2", v1alpha1.PhaseRejected)
	if v2.Status.Reason != "RejectedByPerson" || v2.Status.DecisionTime == nil {
		t.Errorf("rejected v2: %+v", v2.Status)
	}
	line = waitLineCondition(t, key, v1alpha1.ConditionRetraining, metav1.ConditionFalse, "RejectedByPerson")
	if line.Status.LiveVersion != "late-risk-v1" {
		t.Errorf("live %s after a rejection", line.Status.LiveVersion)
	}

	// A rejection while training stops the training Job.
	requestRetrain(t, key, "third")
	waitPhase(t, ns, "late-risk-v3", v1alpha1.PhaseTraining)
	waitJob(t, ns, "late-risk-v3-train")
	decide(t, ns, "late-risk-v3", v1alpha1.DecisionRejected, "wrong feature set")
	waitPhase(t, ns, "late-risk-v3", v1alpha1.PhaseRejected)
	eventually(t, waitFor, func() error {
		var job batchv1.Job
		err := k8s.Get(context.Background(), client.ObjectKey{Namespace: ns, Name: "late-risk-v3-train"}, &job)
		if apierrors.IsNotFound(err) || (err == nil && job.DeletionTimestamp != nil) {
			return nil
		}
		return fmt.Errorf("training Job of a rejected version still there (%v)", err)
	})
}

// A training Job that fails makes its version Failed with the Job's reason,
// the line says so, and nothing is evaluated.
func TestTrainingJobFails(t *testing.T) {
	ns := "train-fails"
	key := liveLine(t, ns, nil)
	requestRetrain(t, key, "nightly-7")
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseTraining)
	failJob(t, ns, "late-risk-v1-train", "BackoffLimitExceeded", "Job has reached the specified backoff limit", "OOMKilled loading 14 weeks of scans")
	v1 := waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseFailed)
	if v1.Status.Reason != "BackoffLimitExceeded" {
		t.Errorf("reason %q, want the Job's BackoffLimitExceeded", v1.Status.Reason)
	}
	mustContain(t, "message", v1.Status.Message, "late-risk-v1-train failed", "backoff limit")
	if err := expectCondition(v1.Status.Conditions, v1alpha1.ConditionTrained, metav1.ConditionFalse, "BackoffLimitExceeded"); err != nil {
		t.Error(err)
	}
	line := waitLineCondition(t, key, v1alpha1.ConditionRetraining, metav1.ConditionFalse, "TrainingFailed")
	mustContain(t, "Retraining message", meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionRetraining).Message, "late-risk-v1", "BackoffLimitExceeded")
	ev := waitEvent(t, ns, lineName, "TrainingFailed")
	if ev.Type != corev1.EventTypeWarning {
		t.Errorf("event type %s", ev.Type)
	}
	settle()
	for _, j := range lineJobs(t, ns) {
		if j.Name == "late-risk-v1-gate" {
			t.Error("a version whose training failed was evaluated")
		}
	}

	// The next request trains on a window from the last successful training:
	// there was none, so it is all history again.
	requestRetrain(t, key, "nightly-8")
	v2 := waitPhase(t, ns, "late-risk-v2", v1alpha1.PhaseTraining)
	if v2.Status.DataFrom != nil {
		t.Errorf("data window starts at %v; no training succeeded before", v2.Status.DataFrom)
	}
	// The deadline case reads the same way.
	failJob(t, ns, "late-risk-v2-train", "DeadlineExceeded", "Job was active longer than specified deadline", "")
	v2 = waitPhase(t, ns, "late-risk-v2", v1alpha1.PhaseFailed)
	if v2.Status.Reason != "DeadlineExceeded" {
		t.Errorf("reason %q", v2.Status.Reason)
	}
}

// A rollout past its progress deadline fails the version, and the Deployment
// is restored to the version it replaced.
func TestRolloutFailsAndReverts(t *testing.T) {
	ns := "rollout-fails"
	key := liveLine(t, ns, nil)
	gen := deployment(t, ns).Generation
	requestRetrain(t, key, "after-depot-opening")
	trainAndPass(t, ns, "late-risk-v1")
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhasePromoting)
	deploymentGeneration(t, ns, scorer, gen+1)
	failRollout(t, ns, scorer)

	v1 := waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseFailed)
	if v1.Status.Reason != "RolloutFailed" {
		t.Errorf("reason %q", v1.Status.Reason)
	}
	mustContain(t, "message", v1.Status.Message, "progress deadline")
	eventually(t, waitFor, func() error {
		if a, v := served(t, ns); a != initialURI || v != initial {
			return fmt.Errorf("Deployment serves %s / %s, want it restored to %s", a, v, initial)
		}
		return nil
	})
	if g := deployment(t, ns).Generation; g != gen+2 {
		t.Errorf("generation %d: want one patch out and one back (%d)", g, gen+2)
	}
	waitEvent(t, ns, lineName, "RolloutReverted")
	ev := waitEvent(t, ns, lineName, "RolloutFailed")
	if ev.Type != corev1.EventTypeWarning {
		t.Errorf("event type %s", ev.Type)
	}
	line := waitLineCondition(t, key, v1alpha1.ConditionRetraining, metav1.ConditionFalse, "RolloutFailed")
	if line.Status.LiveVersion != initial {
		t.Errorf("live %s", line.Status.LiveVersion)
	}
	if v0 := getVersion(t, ns, initial); v0.Status.Phase != v1alpha1.PhaseLive {
		t.Errorf("v0 is %s", v0.Status.Phase)
	}
	if got := metricValue(t, "plumbline_rollout_failures_total", map[string]string{"namespace": ns}); got != 1 {
		t.Errorf("rollout failures %v", got)
	}

	// The restored template rolls out; nothing more happens.
	rollOut(t, ns, scorer)
	settle()
	if g := deployment(t, ns).Generation; g != gen+2 {
		t.Errorf("generation moved to %d after the revert rolled out", g)
	}
}

// History keeps historyLimit finished versions, and never prunes the live,
// the previous or the rule-based version.
func TestHistoryPruning(t *testing.T) {
	ns := "pruning"
	key := liveLine(t, ns, func(o *unstructured.Unstructured) { mustSet(t, o, "spec.historyLimit", int64(1)) })
	reject := func(n int) { rejectRetrain(t, key, n, fmt.Sprintf("prune-%d", n)) }
	expect := func(want map[string]v1alpha1.VersionPhase) { t.Helper(); expectVersions(t, ns, want) }

	reject(1)
	reject(2)
	expect(map[string]v1alpha1.VersionPhase{initial: "Live", rulesName: "Standby", "late-risk-v2": "Rejected"})
	waitEvent(t, ns, lineName, "Pruned")

	requestRetrain(t, key, "prune-3")
	trainAndPass(t, ns, "late-risk-v3")
	waitPhase(t, ns, "late-risk-v3", v1alpha1.PhasePromoting)
	rollOutTo(t, ns, "late-risk-v3")
	// v0 is archived now, but it is the previous version: kept.
	expect(map[string]v1alpha1.VersionPhase{initial: "Archived", rulesName: "Standby", "late-risk-v2": "Rejected", "late-risk-v3": "Live"})

	reject(4)
	expect(map[string]v1alpha1.VersionPhase{initial: "Archived", rulesName: "Standby", "late-risk-v3": "Live", "late-risk-v4": "Rejected"})
}

// rejectRetrain asks the line for a retrain (token), and lets version
// late-risk-vN train and fail its gate.
func rejectRetrain(t *testing.T, key client.ObjectKey, n int, token string) {
	t.Helper()
	failing := passingReport()
	failing.Metrics[0].Candidate = f(0.7)
	name := fmt.Sprintf("late-risk-v%d", n)
	requestRetrain(t, key, token)
	waitPhase(t, key.Namespace, name, v1alpha1.PhaseTraining)
	succeedJob(t, key.Namespace, name+"-train", "")
	waitPhase(t, key.Namespace, name, v1alpha1.PhaseEvaluating)
	succeedJob(t, key.Namespace, name+"-gate", encode(t, failing))
	waitPhase(t, key.Namespace, name, v1alpha1.PhaseRejected)
}

// expectVersions waits until the versions of namespace ns (not being
// deleted) and their phases are want.
func expectVersions(t *testing.T, ns string, want map[string]v1alpha1.VersionPhase) {
	t.Helper()
	eventually(t, waitFor, func() error {
		var list v1alpha1.ModelVersionList
		if err := k8s.List(context.Background(), &list, client.InNamespace(ns)); err != nil {
			return err
		}
		got := map[string]v1alpha1.VersionPhase{}
		for _, v := range list.Items {
			if v.DeletionTimestamp == nil {
				got[v.Name] = v.Status.Phase
			}
		}
		if fmt.Sprint(got) != fmt.Sprint(want) {
			return fmt.Errorf("versions %v, want %v", got, want)
		}
		return nil
	})
}

// Finished versions that no longer bear on the line are labelled as
// history and kept out of the manager's main cache; the line reads the
// same; a person can still roll back to one (it is read in full and leaves
// history); pruning counts them.
func TestHistoryVersionsKeptAsMetadata(t *testing.T) {
	ns := "history-kept"
	key := liveLine(t, ns, nil)
	ctx := context.Background()
	history := func(name string) string {
		t.Helper()
		return getVersion(t, ns, name).Labels[v1alpha1.HistoryLabel]
	}
	waitHistory := func(name, want string) {
		t.Helper()
		eventually(t, waitFor, func() error {
			if got := history(name); got != want {
				return fmt.Errorf("%s: history label %q, want %q", name, got, want)
			}
			return nil
		})
	}

	rejectRetrain(t, key, 1, "kept-1")
	rejectRetrain(t, key, 2, "kept-2")
	// v1 bears on nothing now (v2 is the newer outcome and data window);
	// v2, the live v0 and the rule-based version stay in full.
	waitHistory("late-risk-v1", string(v1alpha1.PhaseRejected))
	settled := waitLineCondition(t, key, v1alpha1.ConditionRetraining, metav1.ConditionFalse, "GateFailed")
	mustContain(t, "Retraining", meta.FindStatusCondition(settled.Status.Conditions, v1alpha1.ConditionRetraining).Message, "late-risk-v2")
	if settled.Status.VersionCount != 2 {
		t.Errorf("versionCount %d, want 2", settled.Status.VersionCount)
	}
	for _, name := range []string{initial, rulesName, "late-risk-v2"} {
		if h := history(name); h != "" {
			t.Errorf("%s labelled history %q", name, h)
		}
	}
	// The version itself is whole on the API server.
	if v1 := getVersion(t, ns, "late-risk-v1"); v1.Status.Gate == nil || v1.Status.GateJob == "" || len(v1.Status.Conditions) < 3 {
		t.Errorf("the history version lost its status: %+v", v1.Status)
	}
	cacheAgrees(t, ns)
	// Nothing more is written: the label once, the line unchanged.
	rv := getVersion(t, ns, "late-risk-v1").ResourceVersion
	requestRetrain(t, key, "kept-3")
	trainAndPass(t, ns, "late-risk-v3")
	rollOutTo(t, ns, "late-risk-v3")
	requestRetrain(t, key, "kept-4")
	trainAndPass(t, ns, "late-risk-v4")
	rollOutTo(t, ns, "late-risk-v4")
	waitPhase(t, ns, "late-risk-v4", v1alpha1.PhaseLive)
	if got := getVersion(t, ns, "late-risk-v1").ResourceVersion; got != rv {
		t.Errorf("history version v1 written again (resourceVersion %s -> %s)", rv, got)
	}
	// v0 served before v3 and is no longer the previous one; v2 and v3 are
	// no longer the newest of anything.
	waitHistory(initial, string(v1alpha1.PhaseArchived))
	waitHistory("late-risk-v2", string(v1alpha1.PhaseRejected))
	waitHistory("late-risk-v3", "")
	cacheAgrees(t, ns)

	// A person's rollback to a history version reads it in full.
	setAnnotation(t, key, v1alpha1.RollbackRequestAnnotation, initial)
	v0 := waitPhase(t, ns, initial, v1alpha1.PhasePromoting)
	if _, ok := v0.Labels[v1alpha1.HistoryLabel]; ok {
		t.Errorf("the version rolled back to is still labelled history: %v", v0.Labels)
	}
	rollOutTo(t, ns, initial)
	waitPhase(t, ns, initial, v1alpha1.PhaseLive)
	waitHistory("late-risk-v3", string(v1alpha1.PhaseArchived)) // no longer the previous one
	waitHistory("late-risk-v4", "")                             // now it is

	// Pruning counts the history versions: with room for one finished
	// version, the oldest go (v1, v2 in history; v3 stays, v4 is previous).
	patch := []byte(`{"spec":{"historyLimit":1}}`)
	if err := k8s.Patch(ctx, &v1alpha1.ModelLine{ObjectMeta: metav1.ObjectMeta{Namespace: ns, Name: key.Name}}, client.RawPatch("application/merge-patch+json", patch)); err != nil {
		t.Fatal(err)
	}
	expectVersions(t, ns, map[string]v1alpha1.VersionPhase{initial: "Live", rulesName: "Standby", "late-risk-v3": "Archived", "late-risk-v4": "Archived"})
	waitEvent(t, ns, lineName, "Pruned")
	cacheAgrees(t, ns)
}
