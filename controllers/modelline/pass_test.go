package modelline

import (
	"context"
	"fmt"
	"strings"
	"sync"
	"testing"
	"time"

	appsv1 "k8s.io/api/apps/v1"
	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	"k8s.io/apimachinery/pkg/api/equality"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/runtime"
	"k8s.io/apimachinery/pkg/runtime/schema"
	"k8s.io/apimachinery/pkg/types"
	clientgoscheme "k8s.io/client-go/kubernetes/scheme"
	"k8s.io/client-go/tools/events"
	clocktesting "k8s.io/utils/clock/testing"
	"k8s.io/utils/ptr"
	ctrl "sigs.k8s.io/controller-runtime"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/client/fake"
	"sigs.k8s.io/controller-runtime/pkg/client/interceptor"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/controllers/index"
	"plumbline.dev/plumbline/internal/engine/clock"
	"plumbline.dev/plumbline/internal/engine/promq"
)

// These tests drive whole passes of the ModelLine reconciler without a
// cluster: controller-runtime's fake client holds the objects, interceptors
// refuse writes or answer with conflicts, a manual clock tells the time and a
// stub stands in for Prometheus (the API-server tier runs the real ones).

// stubProm answers every range and instant query with a series whose value
// at time t is value(query, t), one point per step.
type stubProm struct {
	mu    sync.Mutex
	value func(query string, t time.Time) float64
	err   error
	asked []string
}

func (s *stubProm) Range(_ context.Context, q string, start, end time.Time, step time.Duration) ([]promq.Series, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	s.asked = append(s.asked, q)
	if s.err != nil {
		return nil, s.err
	}
	var pts []promq.Point
	for t := start; !t.After(end); t = t.Add(step) {
		pts = append(pts, promq.Point{T: t, V: s.value(q, t)})
	}
	return []promq.Series{{Labels: "{}", Points: pts}}, nil
}

func (s *stubProm) Instant(_ context.Context, q string, at time.Time) ([]promq.Series, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	s.asked = append(s.asked, q)
	if s.err != nil {
		return nil, s.err
	}
	return []promq.Series{{Labels: "{}", Points: []promq.Point{{T: at, V: s.value(q, at)}}}}, nil
}

// world is one line's objects in a fake API server and a reconciler over it.
type world struct {
	t    *testing.T
	c    client.WithWatch
	r    *Reconciler
	clk  *clocktesting.FakePassiveClock
	prom *stubProm
	rec  *events.FakeRecorder
	key  types.NamespacedName
}

var passStart = time.Date(2026, 11, 2, 9, 0, 0, 0, time.UTC)

// newWorld builds a fake API server holding objs, with the interceptor
// funcs in front of it (a zero Funcs intercepts nothing).
func newWorld(t *testing.T, funcs interceptor.Funcs, line *v1alpha1.ModelLine, objs ...client.Object) *world {
	t.Helper()
	s := runtime.NewScheme()
	if err := clientgoscheme.AddToScheme(s); err != nil {
		t.Fatal(err)
	}
	if err := v1alpha1.AddToScheme(s); err != nil {
		t.Fatal(err)
	}
	base := fake.NewClientBuilder().WithScheme(s).
		WithObjects(append([]client.Object{line}, objs...)...).
		WithStatusSubresource(&v1alpha1.ModelLine{}, &v1alpha1.ModelVersion{}).
		WithIndex(&v1alpha1.ModelVersion{}, index.VersionLine, index.LineOfVersion).
		Build()
	c := interceptor.NewClient(interceptor.NewClient(base, apiServerGenerations()), funcs)
	clk := clocktesting.NewFakePassiveClock(passStart)
	prom := &stubProm{value: func(string, time.Time) float64 { return 0.9 }}
	rec := events.NewFakeRecorder(1000)
	r := &Reconciler{Client: c, APIReader: c, Clock: clock.Manual{PassiveClock: clk}, Recorder: rec, Prometheus: prom}
	return &world{t: t, c: c, r: r, clk: clk, prom: prom, rec: rec, key: client.ObjectKeyFromObject(line)}
}

// apiServerGenerations does what the fake client leaves out and the API
// server does: a Deployment's metadata.generation moves when its spec
// changes, so a rollout is in progress until the Deployment controller
// (rolledOut) catches up.
func apiServerGenerations() interceptor.Funcs {
	return interceptor.Funcs{Patch: func(ctx context.Context, c client.WithWatch, obj client.Object, patch client.Patch, opts ...client.PatchOption) error {
		d, ok := obj.(*appsv1.Deployment)
		if !ok {
			return c.Patch(ctx, obj, patch, opts...)
		}
		var before appsv1.Deployment
		if err := c.Get(ctx, client.ObjectKeyFromObject(d), &before); err != nil {
			return err
		}
		if err := c.Patch(ctx, d, patch, opts...); err != nil {
			return err
		}
		if equality.Semantic.DeepEqual(before.Spec, d.Spec) {
			return nil
		}
		d.Generation = before.Generation + 1
		return c.Update(ctx, d)
	}}
}

// pass runs one reconcile of the line.
func (w *world) pass() (ctrl.Result, error) {
	return w.r.Reconcile(context.Background(), ctrl.Request{NamespacedName: w.key})
}

// mustPass runs one reconcile and fails the test on an error.
func (w *world) mustPass() ctrl.Result {
	w.t.Helper()
	res, err := w.pass()
	if err != nil {
		w.t.Fatalf("pass at %s: %v", w.clk.Now().Format(time.RFC3339), err)
	}
	return res
}

func (w *world) line() *v1alpha1.ModelLine {
	w.t.Helper()
	var l v1alpha1.ModelLine
	if err := w.c.Get(context.Background(), w.key, &l); err != nil {
		w.t.Fatal(err)
	}
	return &l
}

func (w *world) version(name string) *v1alpha1.ModelVersion {
	w.t.Helper()
	var v v1alpha1.ModelVersion
	if err := w.c.Get(context.Background(), types.NamespacedName{Namespace: w.key.Namespace, Name: name}, &v); err != nil {
		w.t.Fatal(err)
	}
	return &v
}

func (w *world) deployment() *appsv1.Deployment {
	w.t.Helper()
	var d appsv1.Deployment
	if err := w.c.Get(context.Background(), types.NamespacedName{Namespace: w.key.Namespace, Name: "scorer"}, &d); err != nil {
		w.t.Fatal(err)
	}
	return &d
}

func (w *world) jobs() []batchv1.Job {
	w.t.Helper()
	var jobs batchv1.JobList
	if err := w.c.List(context.Background(), &jobs, client.InNamespace(w.key.Namespace)); err != nil {
		w.t.Fatal(err)
	}
	return jobs.Items
}

// events drains the events recorded so far.
func (w *world) events() []string {
	var out []string
	for {
		select {
		case e := <-w.rec.Events:
			out = append(out, e)
		default:
			return out
		}
	}
}

// rolledOut plays the Deployment controller: the current template is
// observed, updated and available.
func (w *world) rolledOut() {
	w.t.Helper()
	d := w.deployment()
	d.Status = appsv1.DeploymentStatus{ObservedGeneration: d.Generation, Replicas: 1, UpdatedReplicas: 1, AvailableReplicas: 1, ReadyReplicas: 1}
	if err := w.c.Status().Update(context.Background(), d); err != nil {
		w.t.Fatal(err)
	}
}

// finishJob plays the Job controller and the kubelet: the Job completes (or
// fails) and its Pod leaves message as its termination message.
func (w *world) finishJob(name string, ok bool, message string) {
	w.t.Helper()
	ctx := context.Background()
	var job batchv1.Job
	if err := w.c.Get(ctx, types.NamespacedName{Namespace: w.key.Namespace, Name: name}, &job); err != nil {
		w.t.Fatal(err)
	}
	if job.UID == "" {
		job.UID = types.UID("uid-" + name)
		if err := w.c.Update(ctx, &job); err != nil {
			w.t.Fatal(err)
		}
	}
	cond, phase := batchv1.JobComplete, corev1.PodSucceeded
	if !ok {
		cond, phase = batchv1.JobFailed, corev1.PodFailed
	}
	job.Status.Conditions = append(job.Status.Conditions, batchv1.JobCondition{Type: cond, Status: corev1.ConditionTrue, Reason: "Played"})
	if err := w.c.Status().Update(ctx, &job); err != nil {
		w.t.Fatal(err)
	}
	last := job.Spec.Template.Spec.Containers[len(job.Spec.Template.Spec.Containers)-1].Name
	pod := &corev1.Pod{
		ObjectMeta: metav1.ObjectMeta{Name: name + "-pod", Namespace: job.Namespace,
			Labels:          map[string]string{batchv1.ControllerUidLabel: string(job.UID)},
			OwnerReferences: []metav1.OwnerReference{*metav1.NewControllerRef(&job, batchv1.SchemeGroupVersion.WithKind("Job"))}},
		Spec: job.Spec.Template.Spec,
		Status: corev1.PodStatus{Phase: phase, ContainerStatuses: []corev1.ContainerStatus{{Name: last,
			State: corev1.ContainerState{Terminated: &corev1.ContainerStateTerminated{Message: message}}}}},
	}
	if err := w.c.Create(ctx, pod); err != nil {
		w.t.Fatal(err)
	}
}

// annotate sets an annotation on the line, as kubectl annotate would.
func (w *world) annotate(k, v string) {
	w.t.Helper()
	l := w.line()
	orig := l.DeepCopy()
	if l.Annotations == nil {
		l.Annotations = map[string]string{}
	}
	l.Annotations[k] = v
	if err := w.c.Patch(context.Background(), l, client.MergeFrom(orig)); err != nil {
		w.t.Fatal(err)
	}
}

func hasEvent(evs []string, parts ...string) bool {
	for _, e := range evs {
		all := true
		for _, p := range parts {
			all = all && strings.Contains(e, p)
		}
		if all {
			return true
		}
	}
	return false
}

// Fixtures: the Larkspur line with a scorer Deployment.

const passNS = "larkspur"

func scorerDeployment(version, artifact string) *appsv1.Deployment {
	d := &appsv1.Deployment{
		ObjectMeta: metav1.ObjectMeta{Name: "scorer", Namespace: passNS, Generation: 1},
		Spec: appsv1.DeploymentSpec{
			Replicas: ptr.To[int32](1),
			Template: corev1.PodTemplateSpec{
				ObjectMeta: metav1.ObjectMeta{Annotations: map[string]string{}},
				Spec:       corev1.PodSpec{Containers: []corev1.Container{{Name: "scorer", Image: "scorer:1", Env: []corev1.EnvVar{{Name: "MODEL_URI", Value: artifact}}}}},
			},
		},
		Status: appsv1.DeploymentStatus{ObservedGeneration: 1, Replicas: 1, UpdatedReplicas: 1, AvailableReplicas: 1},
	}
	if version != "" {
		d.Spec.Template.Annotations[v1alpha1.VersionAnnotation] = version
	}
	return d
}

func passLine() *v1alpha1.ModelLine {
	line := &v1alpha1.ModelLine{ObjectMeta: metav1.ObjectMeta{Name: "late-risk", Namespace: passNS, Generation: 1, UID: "line-uid"}}
	job := batchv1.JobTemplateSpec{Spec: batchv1.JobSpec{Template: corev1.PodTemplateSpec{Spec: corev1.PodSpec{
		Containers: []corev1.Container{{Name: "main", Image: "plumbline:dev"}}}}}}
	line.Spec.Serving = v1alpha1.ServingSpec{DeploymentName: "scorer", ContainerName: "scorer", ArtifactEnv: "MODEL_URI"}
	line.Spec.Training = &v1alpha1.TrainingSpec{JobTemplate: job, ArtifactURI: "s3://larkspur/late-risk/{{.Version}}"}
	line.Spec.Gate = v1alpha1.GateSpec{JobTemplate: job, Approval: v1alpha1.ApprovalAutomatic,
		Criteria: []v1alpha1.GateCriterion{{Metric: "roc_auc", MaxRegression: ptr.To(0.01), Confidence: ptr.To(0.95)}}}
	return line
}

// modelVersion is a version of the pass line in a phase, created at minute
// m past 08:00.
func modelVersion(name string, m int, phase v1alpha1.VersionPhase, source v1alpha1.VersionSource) *v1alpha1.ModelVersion {
	v := &v1alpha1.ModelVersion{
		ObjectMeta: metav1.ObjectMeta{Name: name, Namespace: passNS, UID: types.UID("uid-" + name),
			CreationTimestamp: metav1.NewTime(passStart.Add(-time.Hour + time.Duration(m)*time.Minute)),
			Labels:            map[string]string{v1alpha1.LineLabel: "late-risk"}},
		Spec:   v1alpha1.ModelVersionSpec{Line: "late-risk", Source: source, ArtifactURI: "s3://larkspur/late-risk/" + name},
		Status: v1alpha1.ModelVersionStatus{Phase: phase},
	}
	if source == v1alpha1.SourceTrained {
		v.Spec.Cause = v1alpha1.ReasonManual
	}
	return v
}

func at(d time.Duration) *metav1.Time {
	t := metav1.NewTime(passStart.Add(d))
	return &t
}

// guardedWorld: v1 went live at 08:50 in place of v0 (archived); a guard
// with an hour of probation watches it over ten minutes; the rules wait in
// reserve. Prometheus says the quality is 0.9 until the test says otherwise.
func guardedWorld(t *testing.T, funcs interceptor.Funcs) *world {
	line := passLine()
	line.Spec.Guard = &v1alpha1.GuardSpec{Query: "late_risk_auc", Below: ptr.To(0.7), ForSeconds: 600, EverySeconds: 60, ProbationSeconds: 3600}
	line.Spec.Fallback = &v1alpha1.FallbackSpec{RuleBasedVersion: "rules"}
	line.Status.LiveVersion = "late-risk-v1"
	v0 := modelVersion("late-risk-v0", 0, v1alpha1.PhaseArchived, v1alpha1.SourceImported)
	v0.Status.Promotion = &v1alpha1.PromotionStatus{Kind: v1alpha1.PromotionCandidate, Sequence: 1, StartedTime: at(-2 * time.Hour)}
	v0.Status.PromotedTime = at(-2 * time.Hour)
	v1 := modelVersion("late-risk-v1", 10, v1alpha1.PhaseLive, v1alpha1.SourceTrained)
	v1.Status.Promotion = &v1alpha1.PromotionStatus{Kind: v1alpha1.PromotionCandidate, Sequence: 2, StartedTime: at(-11 * time.Minute),
		FromVersion: "late-risk-v0", FromArtifactURI: v0.Spec.ArtifactURI}
	v1.Status.PromotedTime = at(-10 * time.Minute)
	v1.Status.Gate = &v1alpha1.GateResult{Verdict: v1alpha1.GatePassed}
	rules := modelVersion("rules", 0, v1alpha1.PhaseStandby, v1alpha1.SourceRuleBased)
	return newWorld(t, funcs, line, v0, v1, rules, scorerDeployment("late-risk-v1", v1.Spec.ArtifactURI))
}

// refuseFirstVersionStatus returns interceptor funcs that answer the first status write
// of a ModelVersion with a conflict, and lets every other write through.
func refuseFirstVersionStatus(refused *int) interceptor.Funcs {
	return interceptor.Funcs{SubResourcePatch: func(ctx context.Context, c client.Client, sub string, obj client.Object, patch client.Patch, opts ...client.SubResourcePatchOption) error {
		if _, ok := obj.(*v1alpha1.ModelVersion); ok && sub == "status" && *refused == 0 {
			*refused++
			return conflict(obj)
		}
		return c.SubResource(sub).Patch(ctx, obj, patch, opts...)
	}}
}

func conflict(obj client.Object) error {
	return apierrors.NewConflict(schema.GroupResource{Group: v1alpha1.GroupVersion.Group, Resource: "modelversions"}, obj.GetName(), fmt.Errorf("the object has been modified"))
}

// passingGateReport is a report that meets passLine's criterion (ROC AUC no
// more than 0.01 worse than live, at 95%).
func passingGateReport() string {
	return `{"schema":"plumbline.dev/gate-report/v1","rows":4000,"metrics":[{"metric":"roc_auc","segment":"","candidate":0.81,"baseline":0.8,"delta":0.01,"deltaLow":0.002,"deltaHigh":0.018,"confidence":0.95,"pValue":0.02,"test":"delong","n":4000}],"mustPass":{"total":0,"failed":0},"truncated":false}`
}
