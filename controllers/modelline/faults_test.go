package modelline

import (
	"context"
	"errors"
	"strings"
	"testing"
	"time"

	batchv1 "k8s.io/api/batch/v1"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/runtime/schema"
	ctrl "sigs.k8s.io/controller-runtime"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/client/interceptor"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// A switch of what serves (the guard's rollback, a person's rollback) is
// recorded in one pass and the Deployment patched in a later one. When the
// record is refused once (a conflict), the Deployment must still serve what
// it served, so the next pass records the right restore target: the version
// being replaced, not the one switched to.
func TestSwitchPatchesTheDeploymentOnlyAfterItIsRecorded(t *testing.T) {
	cases := []struct {
		name string
		// start makes the world ask for a switch to late-risk-v0.
		start func(w *world)
		kind  v1alpha1.PromotionKind
	}{
		{"guard rollback", func(w *world) {
			w.prom.value = func(string, time.Time) float64 { return 0.5 } // regressed
		}, v1alpha1.PromotionRollback},
		{"a person's rollback", func(w *world) {
			w.annotate(v1alpha1.RollbackRequestAnnotation, "late-risk-v0")
		}, v1alpha1.PromotionRequested},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			refused := 0
			w := guardedWorld(t, refuseFirstVersionStatus(&refused))
			v1URI := w.version("late-risk-v1").Spec.ArtifactURI
			v0URI := w.version("late-risk-v0").Spec.ArtifactURI
			c.start(w)

			// Pass 1: the switch is decided, its record refused.
			if _, err := w.pass(); err != nil {
				t.Fatalf("a conflict is retried, not an error: %v", err)
			}
			if refused != 1 {
				t.Fatalf("the version's status write was refused %d times, want 1", refused)
			}
			if got := servedBy(w.deployment(), w.line().Spec.Serving); got.version != "late-risk-v1" || got.artifact != v1URI {
				t.Fatalf("after the refused record the Deployment serves %+v; it must not be patched before the switch is recorded", got)
			}

			// Pass 2: recorded, with what serves now as the restore target.
			w.mustPass()
			v0 := w.version("late-risk-v0")
			if p := v0.Status.Promotion; p == nil || p.Kind != c.kind || p.FromVersion != "late-risk-v1" || p.FromArtifactURI != v1URI {
				t.Fatalf("recorded switch %+v; want kind %s from late-risk-v1 (%s)", p, c.kind, v1URI)
			}
			if v0.Status.Phase != v1alpha1.PhasePromoting {
				t.Fatalf("v0 is %s, want Promoting", v0.Status.Phase)
			}
			if got := servedBy(w.deployment(), w.line().Spec.Serving); got.version != "late-risk-v1" {
				t.Fatalf("the pass that recorded the switch patched the Deployment (%+v)", got)
			}

			// Pass 3 patches, pass 4 sees the rollout through.
			w.mustPass()
			if got := servedBy(w.deployment(), w.line().Spec.Serving); got.version != "late-risk-v0" || got.artifact != v0URI {
				t.Fatalf("after the recorded switch the Deployment serves %+v, want late-risk-v0", got)
			}
			w.rolledOut()
			w.mustPass()
			if v := w.version("late-risk-v0"); v.Status.Phase != v1alpha1.PhaseLive {
				t.Fatalf("v0 is %s after its rollout, want Live", v.Status.Phase)
			}
			if v := w.version("late-risk-v1"); v.Status.Phase != v1alpha1.PhaseArchived {
				t.Fatalf("v1 is %s, want Archived", v.Status.Phase)
			}
		})
	}
}

// countingReader counts the reads of ModelLines that go past the cache.
type countingReader struct {
	client.Reader
	lineReads int
}

func (c *countingReader) Get(ctx context.Context, key client.ObjectKey, obj client.Object, opts ...client.GetOption) error {
	if _, ok := obj.(*v1alpha1.ModelLine); ok {
		c.lineReads++
	}
	return c.Reader.Get(ctx, key, obj, opts...)
}

// The cache can lag behind the controller's own write, so a pass on a line
// whose cached copy is not the one last written reads it from the API
// server. Once it has read a newer copy (someone else's edit), later passes
// on that copy use the cache again; and a deleted line is forgotten.
func TestFreshReadsPastTheCacheOnlyWhileItLags(t *testing.T) {
	w := newWorld(t, interceptor.Funcs{}, passLine(), scorerDeployment("", "s3://larkspur/rules"))
	reader := &countingReader{Reader: w.c}
	w.r.APIReader = reader

	w.mustPass() // writes the line's first status
	if reader.lineReads != 0 {
		t.Fatalf("the first pass read the line %d times past the cache", reader.lineReads)
	}
	w.annotate("larkspur.example/owner", "routing-team") // someone else's edit
	w.mustPass()
	if reader.lineReads != 1 {
		t.Fatalf("after an edit by someone else the line was read %d times past the cache, want 1", reader.lineReads)
	}
	for i := 0; i < 3; i++ {
		w.mustPass()
	}
	if reader.lineReads != 1 {
		t.Errorf("passes on an unchanged line read it past the cache: %d reads in all, want 1", reader.lineReads)
	}

	if err := w.c.Delete(context.Background(), w.line()); err != nil {
		t.Fatal(err)
	}
	w.mustPass()
	if _, ok := w.r.written.Load(w.key); ok {
		t.Error("a deleted line is still remembered")
	}
}

// status.lastRetrainTime has one meaning and one writer: when the training
// of the line's newest retrain started. A retrain asked for while another
// trains waits in Pending and moves it only once its own training starts.
func TestLastRetrainTimeIsWhenTrainingStarted(t *testing.T) {
	line := passLine()
	v0 := modelVersion("late-risk-v0", 0, v1alpha1.PhaseLive, v1alpha1.SourceImported)
	v0.Status.PromotedTime = at(-2 * time.Hour)
	v0.Status.Promotion = &v1alpha1.PromotionStatus{Sequence: 1}
	v1 := modelVersion("late-risk-v1", 10, v1alpha1.PhaseTraining, v1alpha1.SourceTrained)
	v1.Labels[v1alpha1.NumberLabel] = "1"
	trainingFrom := passStart.Add(-90 * time.Minute)
	v1.Status.DataTo = at(-90 * time.Minute)
	v1.Status.TrainingJob = jobName(v1.Name, roleTraining)
	line.Status.LastRetrainTime = at(-90 * time.Minute)
	line.Status.VersionCount = 1
	job := buildTrainingJob(line, v1, dataWindow{to: trainingFrom})
	job.UID = "uid-late-risk-v1-train"
	w := newWorld(t, interceptor.Funcs{}, line, v0, v1, job, scorerDeployment("late-risk-v0", v0.Spec.ArtifactURI))

	w.annotate(v1alpha1.RetrainRequestAnnotation, "ops-1")
	w.mustPass()
	if v2 := w.version("late-risk-v2"); v2.Status.Phase != v1alpha1.PhasePending {
		t.Fatalf("the requested version is %s, want Pending behind late-risk-v1", v2.Status.Phase)
	}
	if got := w.line().Status.LastRetrainTime; got == nil || !got.Time.Equal(trainingFrom) {
		t.Fatalf("lastRetrainTime %v after a retrain was only queued; want %s, when late-risk-v1's training started", got, trainingFrom)
	}

	w.clk.SetTime(passStart.Add(20 * time.Minute))
	w.finishJob(job.Name, false, "")
	w.mustPass() // v1 failed
	w.mustPass() // v2 starts training
	if v2 := w.version("late-risk-v2"); v2.Status.Phase != v1alpha1.PhaseTraining {
		t.Fatalf("late-risk-v2 is %s, want Training", v2.Status.Phase)
	}
	if got := w.line().Status.LastRetrainTime; got == nil || !got.Time.Equal(w.clk.Now()) {
		t.Fatalf("lastRetrainTime %v once late-risk-v2 trains; want %s", got, w.clk.Now())
	}
}

// A pass whose action failed returns the error alone: controller-runtime
// ignores a result returned with an error (and says so in its log), so the
// retry comes from the error's backoff, and the status the pass could write
// is written.
func TestFailedActionReturnsTheErrorAlone(t *testing.T) {
	line := passLine()
	line.Spec.Schedule = &v1alpha1.ScheduleSpec{Cron: "0 3 * * *"} // a wake-up is due
	refuseJobs := interceptor.Funcs{Create: func(ctx context.Context, c client.WithWatch, obj client.Object, opts ...client.CreateOption) error {
		if _, ok := obj.(*batchv1.Job); ok {
			return apierrors.NewInternalError(errors.New("etcdserver: request timed out"))
		}
		return c.Create(ctx, obj, opts...)
	}}
	w := newWorld(t, refuseJobs, line, scorerDeployment("", "s3://larkspur/rules"))
	w.annotate(v1alpha1.RetrainRequestAnnotation, "ops-1")
	res, err := w.pass()
	if err == nil || !strings.Contains(err.Error(), "request timed out") {
		t.Fatalf("the refused Job creation came back as %v", err)
	}
	if res != (ctrl.Result{}) {
		t.Errorf("a failed pass returned %+v with its error; controller-runtime would ignore it", res)
	}
	if got := w.line().Status.NextScheduleTime; got == nil {
		t.Error("the failed pass did not write what it could (nextScheduleTime)")
	}
	if v := w.version("late-risk-v1"); v.Status.Number != 1 {
		t.Errorf("the version the pass created has number %d in its status, want 1", v.Status.Number)
	}
}

// A request the API server refuses for want of a permission is not retried
// in a loop: the line says what is missing in Ready (PermissionDenied) with
// one Warning event, tries again calmly, and goes on once it is granted.
func TestMissingPermissionIsAConditionNotALoop(t *testing.T) {
	forbidden := true
	refuseJobs := interceptor.Funcs{Create: func(ctx context.Context, c client.WithWatch, obj client.Object, opts ...client.CreateOption) error {
		if _, ok := obj.(*batchv1.Job); ok && forbidden {
			return apierrors.NewForbidden(schema.GroupResource{Group: "batch", Resource: "jobs"}, obj.GetName(),
				errors.New(`User "system:serviceaccount:plumbline-system:plumbline-manager" cannot create resource "jobs" in API group "batch" in the namespace "larkspur"`))
		}
		return c.Create(ctx, obj, opts...)
	}}
	w := newWorld(t, refuseJobs, passLine(), scorerDeployment("", "s3://larkspur/rules"))
	w.annotate(v1alpha1.RetrainRequestAnnotation, "ops-1")
	res, err := w.pass()
	if err != nil || res.RequeueAfter != permissionRetry {
		t.Fatalf("a refused permission gave %+v, %v; want a calm retry in %s and no error", res, err, permissionRetry)
	}
	ready := meta.FindStatusCondition(w.line().Status.Conditions, v1alpha1.ConditionReady)
	if ready == nil || ready.Status != metav1.ConditionFalse || ready.Reason != v1alpha1.ReasonPermissionDenied ||
		!strings.Contains(ready.Message, `cannot create resource "jobs"`) || !strings.Contains(ready.Message, "config/rbac") {
		t.Fatalf("Ready %+v", ready)
	}
	if evs := w.events(); !hasEvent(evs, "Warning", "PermissionDenied", `cannot create resource "jobs"`) {
		t.Errorf("no PermissionDenied event: %v", evs)
	}
	rv := w.line().ResourceVersion
	w.mustPass()
	if w.line().ResourceVersion != rv {
		t.Error("a second refused pass wrote the line again")
	}
	if evs := w.events(); hasEvent(evs, "PermissionDenied") {
		t.Errorf("a second refused pass told again: %v", evs)
	}

	forbidden = false // a person granted it
	w.mustPass()
	// Nothing serves yet, so the line is not Ready, but no person is needed.
	if c := meta.FindStatusCondition(w.line().Status.Conditions, v1alpha1.ConditionReady); c.Reason != v1alpha1.ReasonNothingLive {
		t.Fatalf("Ready %+v after the permission was granted, want NothingLive", c)
	}
	if c := meta.FindStatusCondition(w.line().Status.Conditions, v1alpha1.ConditionActionRequired); c.Status != metav1.ConditionFalse {
		t.Fatalf("ActionRequired %+v after the permission was granted", c)
	}
	if v := w.version("late-risk-v1"); v.Status.Phase != v1alpha1.PhaseTraining {
		t.Errorf("late-risk-v1 is %s once the Job may be created, want Training", v.Status.Phase)
	}
	if evs := w.events(); !hasEvent(evs, "Normal", "PermissionDenied is resolved") {
		t.Errorf("no event for the recovery: %v", evs)
	}
}

// A refusal of a read the pass needs before it can do anything (listing
// the line's Jobs) is reported the same way: Ready says what is missing,
// and the line is tried again calmly.
func TestMissingReadPermissionIsACondition(t *testing.T) {
	refuseList := interceptor.Funcs{List: func(ctx context.Context, c client.WithWatch, list client.ObjectList, opts ...client.ListOption) error {
		if _, ok := list.(*batchv1.JobList); ok {
			return apierrors.NewForbidden(schema.GroupResource{Group: "batch", Resource: "jobs"}, "",
				errors.New(`User "system:serviceaccount:plumbline-system:plumbline-manager" cannot list resource "jobs" in API group "batch" in the namespace "larkspur"`))
		}
		return c.List(ctx, list, opts...)
	}}
	w := newWorld(t, refuseList, passLine(), scorerDeployment("", "s3://larkspur/rules"))
	res, err := w.pass()
	if err != nil || res.RequeueAfter != permissionRetry {
		t.Fatalf("a refused list gave %+v, %v; want a calm retry in %s and no error", res, err, permissionRetry)
	}
	ready := meta.FindStatusCondition(w.line().Status.Conditions, v1alpha1.ConditionReady)
	if ready == nil || ready.Reason != v1alpha1.ReasonPermissionDenied || !strings.Contains(ready.Message, `cannot list resource "jobs"`) {
		t.Fatalf("Ready %+v", ready)
	}
	if c := meta.FindStatusCondition(w.line().Status.Conditions, v1alpha1.ConditionActionRequired); c == nil || c.Status != metav1.ConditionTrue || c.Reason != v1alpha1.ReasonPermissionDenied {
		t.Errorf("ActionRequired %+v: a missing permission needs a person", c)
	}
	if evs := w.events(); !hasEvent(evs, "Warning", "PermissionDenied") {
		t.Errorf("no PermissionDenied event: %v", evs)
	}
}

// Objects gone under the pass: a training Job deleted before it finished
// fails its version (TrainingJobLost) and starts nothing else; the serving
// Deployment deleted in the middle of a rollout stops the line
// (ServingNotFound) without touching the version, and the rollout goes on
// once a Deployment is back.
func TestObjectsGone(t *testing.T) {
	line := passLine()
	v0 := modelVersion("late-risk-v0", 0, v1alpha1.PhaseLive, v1alpha1.SourceImported)
	v0.Status.PromotedTime = at(-time.Hour)
	v0.Status.Promotion = &v1alpha1.PromotionStatus{Sequence: 1}
	w := newWorld(t, interceptor.Funcs{}, line, v0, scorerDeployment("late-risk-v0", v0.Spec.ArtifactURI))
	ctx := context.Background()

	w.annotate(v1alpha1.RetrainRequestAnnotation, "ops-1")
	w.mustPass()
	var job batchv1.Job
	job.Namespace, job.Name = passNS, "late-risk-v1-train"
	if err := w.c.Delete(ctx, &job); err != nil {
		t.Fatal(err)
	}
	w.mustPass()
	v1 := w.version("late-risk-v1")
	if v1.Status.Phase != v1alpha1.PhaseFailed || v1.Status.Reason != reasonTrainingLost {
		t.Fatalf("after its training Job was deleted, late-risk-v1 is %s/%s", v1.Status.Phase, v1.Status.Reason)
	}
	if c := meta.FindStatusCondition(v1.Status.Conditions, v1alpha1.ConditionTrained); c == nil || c.Status != metav1.ConditionFalse || c.Reason != reasonTrainingLost {
		t.Errorf("Trained %+v", c)
	}
	if n := len(w.jobs()); n != 0 {
		t.Errorf("%d Jobs after the training Job was lost; nothing else should start", n)
	}

	// A rollout whose Deployment goes away.
	w.annotate(v1alpha1.RetrainRequestAnnotation, "ops-2")
	w.mustPass()
	w.finishJob("late-risk-v2-train", true, "")
	w.mustPass()
	w.finishJob("late-risk-v2-gate", true, passingGateReport())
	w.mustPass() // records the promotion
	if err := w.c.Delete(ctx, w.deployment()); err != nil {
		t.Fatal(err)
	}
	w.mustPass()
	ready := meta.FindStatusCondition(w.line().Status.Conditions, v1alpha1.ConditionReady)
	if ready == nil || ready.Status != metav1.ConditionFalse || ready.Reason != v1alpha1.ReasonServingNotFound {
		t.Fatalf("Ready %+v with the Deployment gone", ready)
	}
	if v2 := w.version("late-risk-v2"); v2.Status.Phase != v1alpha1.PhasePromoting {
		t.Fatalf("late-risk-v2 is %s with the Deployment gone; it waits, Promoting", v2.Status.Phase)
	}
	d := scorerDeployment("late-risk-v0", v0.Spec.ArtifactURI)
	d.ResourceVersion = ""
	if err := w.c.Create(ctx, d); err != nil {
		t.Fatal(err)
	}
	w.mustPass()
	if got := servedBy(w.deployment(), w.line().Spec.Serving); got.version != "late-risk-v2" {
		t.Fatalf("the new Deployment serves %+v; the recorded rollout should go on", got)
	}
	w.rolledOut()
	w.mustPass()
	if v2 := w.version("late-risk-v2"); v2.Status.Phase != v1alpha1.PhaseLive {
		t.Errorf("late-risk-v2 is %s after the rollout", v2.Status.Phase)
	}
}

// A person may roll back to the same version more than once: a request is
// the version's name, optionally followed by "/" and a token, and each
// distinct value acts once.
func TestRollbackToTheSameVersionTwice(t *testing.T) {
	w := guardedWorld(t, interceptor.Funcs{})
	switchTo := func(value, version string) {
		t.Helper()
		w.annotate(v1alpha1.RollbackRequestAnnotation, value)
		w.mustPass() // recorded
		if v := w.version(version); v.Status.Phase != v1alpha1.PhasePromoting {
			t.Fatalf("after %s=%s, %s is %s, want Promoting (events %v)", v1alpha1.RollbackRequestAnnotation, value, version, v.Status.Phase, w.events())
		}
		w.mustPass() // patched
		w.rolledOut()
		w.mustPass()
		if v := w.version(version); v.Status.Phase != v1alpha1.PhaseLive {
			t.Fatalf("%s is %s after its rollout", version, v.Status.Phase)
		}
	}
	switchTo("late-risk-v0", "late-risk-v0")
	switchTo("late-risk-v1", "late-risk-v1")
	switchTo("late-risk-v0/second-time", "late-risk-v0")
	if got := w.line().Status.LastRollbackRequest; got != "late-risk-v0/second-time" {
		t.Errorf("lastRollbackRequest %q", got)
	}
}

// A person edits the line (an annotation) while a pass starts a retrain:
// the pass's status write meets the newer line. The version is made, and
// a pass redone would not decide the start again, so the start's record
// (Blocked: ChecksPassed, the request handled) is written against the line
// as it is now, not lost.
func TestStartIsRecordedWhenTheLineIsEditedMeanwhile(t *testing.T) {
	line := passLine()
	v0 := modelVersion("late-risk-v0", 0, v1alpha1.PhaseLive, v1alpha1.SourceImported)
	edited := false
	editDuringPass := interceptor.Funcs{Create: func(ctx context.Context, c client.WithWatch, obj client.Object, opts ...client.CreateOption) error {
		if err := c.Create(ctx, obj, opts...); err != nil {
			return err
		}
		if _, ok := obj.(*v1alpha1.ModelVersion); ok && !edited {
			edited = true
			var l v1alpha1.ModelLine
			if err := c.Get(ctx, client.ObjectKey{Namespace: passNS, Name: "late-risk"}, &l); err != nil {
				return err
			}
			orig := l.DeepCopy()
			l.Annotations = map[string]string{"larkspur.example/owner": "routing-team"}
			return c.Patch(ctx, &l, client.MergeFrom(orig))
		}
		return nil
	}}
	w := newWorld(t, editDuringPass, line, v0, scorerDeployment("late-risk-v0", v0.Spec.ArtifactURI))
	w.mustPass()
	w.annotate(v1alpha1.RetrainRequestAnnotation, "ops-1")
	w.mustPass()
	w.mustPass() // as the requeue after a conflict would
	if !edited {
		t.Fatal("no version was created: the edit never happened")
	}
	got := w.line()
	if c := meta.FindStatusCondition(got.Status.Conditions, v1alpha1.ConditionBlocked); c == nil || c.Status != metav1.ConditionFalse || c.Reason != "ChecksPassed" {
		t.Errorf("the start's record was lost: Blocked is %+v, want False/ChecksPassed", c)
	}
	if got.Status.LastRetrainRequest != "ops-1" {
		t.Errorf("lastRetrainRequest %q", got.Status.LastRetrainRequest)
	}
	if got.Annotations["larkspur.example/owner"] != "routing-team" {
		t.Errorf("the person's edit was lost: %v", got.Annotations)
	}
}
