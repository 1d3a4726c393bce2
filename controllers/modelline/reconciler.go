package modelline

import (
	"context"
	"fmt"
	"slices"
	"sort"
	"strings"
	"sync"
	"time"

	appsv1 "k8s.io/api/apps/v1"
	batchv1 "k8s.io/api/batch/v1"
	"k8s.io/apimachinery/pkg/api/equality"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/runtime"
	"k8s.io/apimachinery/pkg/types"
	"k8s.io/client-go/tools/events"
	ctrl "sigs.k8s.io/controller-runtime"
	"sigs.k8s.io/controller-runtime/pkg/builder"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/controller"
	"sigs.k8s.io/controller-runtime/pkg/handler"
	"sigs.k8s.io/controller-runtime/pkg/log"
	"sigs.k8s.io/controller-runtime/pkg/predicate"
	"sigs.k8s.io/controller-runtime/pkg/reconcile"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/controllers/index"
	"plumbline.dev/plumbline/internal/engine/clock"
	"plumbline.dev/plumbline/internal/engine/promq"
	"plumbline.dev/plumbline/internal/engine/speccheck"
)

// The permissions the manager needs, gathered into config/rbac by
// controller-gen.
// +kubebuilder:rbac:groups=plumbline.dev,resources=modellines,verbs=get;list;watch;update;patch
// +kubebuilder:rbac:groups=plumbline.dev,resources=modellines/status,verbs=get;update;patch
// +kubebuilder:rbac:groups=plumbline.dev,resources=modellines/finalizers,verbs=update
// +kubebuilder:rbac:groups=apps,resources=deployments,verbs=get;list;watch;update;patch
// +kubebuilder:rbac:groups=batch,resources=jobs,verbs=get;list;watch;create;delete
// +kubebuilder:rbac:groups="",resources=pods,verbs=get;list;watch
// +kubebuilder:rbac:groups=events.k8s.io,resources=events,verbs=create;patch
// +kubebuilder:rbac:groups="",resources=events,verbs=create;patch

// Reconciler keeps a ModelLine's status true to its spec and the
// cluster.
type Reconciler struct {
	client.Client
	// APIReader reads past the cache: Pods (which are not cached) and objects
	// just created, which the cache may not hold yet.
	APIReader client.Reader
	// History reads the metadata of the history versions (labelled
	// v1alpha1.HistoryLabel), which the main cache leaves out, indexed by
	// index.HistoryLine. Without it no version is labelled as history.
	History  client.Reader
	Clock    clock.Clock
	Recorder events.EventRecorder
	// Prometheus answers the triggers' and checks' queries.
	Prometheus promq.Querier
	// Coverage is the share of a trigger window's points that must be
	// present for the trigger to be judged; zero means 0.8.
	Coverage float64
	// PerLineQueries turns sharing off: every line asks its own queries,
	// even those on a shared template.
	PerLineQueries bool
	// ServingSelector is the manager's --serving-selector, for messages.
	ServingSelector string
	// Unspread makes every evaluation due one interval after the last,
	// instead of on the line's own slot in the interval (tests that drive a
	// manual clock minute by minute).
	Unspread bool
	// LineMetrics is which series are exported per line; empty means
	// LineMetricsConditions.
	LineMetrics LineMetrics

	evals  evaluations
	shared sharedQueries
	specs  specChecks
	// written is the resourceVersion of the newest copy of each line the
	// controller knows: its own last status write, or a copy read past the
	// cache since.
	written sync.Map
}

// lineObservation is what one pass read about a line from the cluster,
// besides the line itself.
type lineObservation struct {
	// problems are spec problems, from speccheck and from references the API
	// server cannot check (the rule-based fallback's source and line).
	problems []speccheck.Problem
	// servingMissing explains why the serving Deployment or container was not
	// found; empty when it was.
	servingMissing string
	// fallbackMissing explains why the rule-based fallback version was not
	// found; empty when it was or none is named.
	fallbackMissing string
}

// Reconcile is one pass over a line: it reads the line and everything it
// refers to (observe), runs the pass's phases in order (phases.go; at most
// one outside action per version: create a Job, patch the Deployment),
// concludes each status by its one writer, writes each changed status once
// (write), then emits the events and metrics for what changed.
func (r *Reconciler) Reconcile(ctx context.Context, req ctrl.Request) (ctrl.Result, error) {
	// The cache's own copy, read without copying it: it is the status the
	// pass's write is computed against, and the pass works on one copy.
	var shared v1alpha1.ModelLine
	if err := r.Get(ctx, req.NamespacedName, &shared, client.UnsafeDisableDeepCopy); err != nil {
		if apierrors.IsNotFound(err) {
			forgetLineMetrics(req.Namespace, req.Name)
			r.evals.forget(req.NamespacedName)
			r.specs.forget(req.NamespacedName)
			r.written.Delete(req.NamespacedName)
			return ctrl.Result{}, nil
		}
		return ctrl.Result{}, fmt.Errorf("get ModelLine %s: %w", req.NamespacedName, err)
	}
	orig, err := r.fresh(ctx, &shared)
	if err != nil {
		return ctrl.Result{}, err
	}
	line := *orig.DeepCopy()
	if r.LineMetrics == LineMetricsAll {
		lineReconciles.WithLabelValues(line.Namespace, line.Name).Inc()
	}

	obs, vw, err := r.observe(ctx, &line)
	if apierrors.IsForbidden(err) {
		return r.denied(ctx, orig, &line, err)
	}
	if err != nil {
		// A failed read is transient: retry with backoff, and leave
		// observedGeneration alone so nobody reads the pass as done.
		return ctrl.Result{}, err
	}
	before := vw.before

	p := &pass{now: metav1.NewTime(r.Clock.Now()), line: &line, vw: vw}
	var phaseErr error
	if setupProblem(obs, nil) == nil {
		phaseErr = r.runPhases(ctx, p)
	}
	readyChanged := conclude(p, obs, phaseErr)

	written, err := r.write(ctx, p, orig, before)
	if err != nil {
		// Tell what the written and the created versions went through,
		// and count it; the rest is recomputed by the pass that follows.
		for name := range p.created {
			written[name] = true
		}
		r.emit(p, written)
		for _, m := range r.counts(p) {
			if m.version != "" && written[m.version] {
				m.inc()
			}
		}
		if apierrors.IsConflict(err) {
			log.FromContext(ctx).V(1).Info("status write raced another change; redoing the pass", "error", err.Error())
			return ctrl.Result{RequeueAfter: conflictRetry}, nil
		}
		return ctrl.Result{}, err
	}
	r.evals.done(req.NamespacedName, line.Generation, p.evaluated, p.now.Time)
	if readyChanged {
		r.eventForReady(orig, &line)
	}
	r.emit(p, nil)
	for _, m := range r.counts(p) {
		m.inc()
	}
	recordLineMetrics(&line, vw.live(), r.LineMetrics)
	if phaseErr == nil && !line.Spec.Suspend {
		if err := r.shelve(ctx, p, written); err != nil {
			return ctrl.Result{}, err
		}
	}
	if apierrors.IsForbidden(phaseErr) {
		// Not a transient error: a person must grant the permission. The
		// line says so and tries again calmly, without a growing backoff,
		// so it goes on soon after the RBAC is fixed.
		return ctrl.Result{RequeueAfter: permissionRetry}, nil
	}
	if phaseErr != nil {
		// What the pass could do is written; the action that failed is
		// retried with the error's backoff. (controller-runtime ignores a
		// result returned with an error, so none is.)
		return ctrl.Result{}, phaseErr
	}
	// The next pass comes from a change to the line, its Deployment, its
	// versions or their Jobs, or when a trigger or a scheduled start is due.
	return ctrl.Result{RequeueAfter: r.requeue(p)}, nil
}

// conclude computes the statuses the pass leaves, each condition by its one
// writer: the conditions the phases judged, every version's conditions
// from its record, the line's summary of its versions, and last the two
// that read the others: ActionRequired and Ready (with a permission the
// phases were refused). It reports whether Ready changed.
func conclude(p *pass, obs lineObservation, phaseErr error) bool {
	line, vw := p.line, p.vw
	p.events = append(p.events, judgeConditions(&line.Status.Conditions, p.judgements, line.Generation, p.now)...)
	for _, v := range vw.versions {
		versionConditions(line, v, p.now)
	}
	summarize(line, vw, p.now)
	if phaseErr == nil {
		line.Status.ObservedGeneration = line.Generation
	}
	return setAttention(line, setupProblem(obs, phaseErr), vw.live(), p.now)
}

// setAttention writes ActionRequired, then Ready, from the line's other
// conditions, and reports whether Ready changed. A Degraded verdict on a
// version that no longer serves (the guard has not judged the one that
// replaced it yet) is not read: it says nothing of the line now.
func setAttention(line *v1alpha1.ModelLine, setup *metav1.Condition, live *v1alpha1.ModelVersion, now metav1.Time) bool {
	conds := &line.Status.Conditions
	current := slices.Clone(*conds)
	if g := line.Status.Guard; live == nil || g == nil || g.Name != live.Name {
		current = slices.DeleteFunc(current, func(c metav1.Condition) bool { return c.Type == v1alpha1.ConditionDegraded })
	}
	action := actionRequiredCondition(current, setup)
	setCondition(conds, action, line.Generation, now)
	meta.SetStatusCondition(&current, action)
	return setCondition(conds, readyCondition(line.Spec.Suspend, setup, current, live), line.Generation, now)
}

// write writes each status the pass changed, once: the versions first (the
// line's summary is derived from them, so a crash between the two writes
// is mended by the next pass), then the line's. It returns the versions it
// wrote.
func (r *Reconciler) write(ctx context.Context, p *pass, orig *v1alpha1.ModelLine, before map[string]v1alpha1.ModelVersionStatus) (map[string]bool, error) {
	written, err := r.writeVersions(ctx, p.vw, before)
	if err != nil || equality.Semantic.DeepEqual(orig.Status, p.line.Status) {
		return written, err
	}
	// The optimistic lock refuses a write computed from a stale copy; the
	// pass is then redone on fresh data, unless only the line's metadata or
	// spec moved (retryStatus).
	key := client.ObjectKeyFromObject(p.line)
	if err := r.Status().Patch(ctx, p.line, client.MergeFromWithOptions(orig, client.MergeFromWithOptimisticLock{})); err != nil {
		if !apierrors.IsConflict(err) || !r.retryStatus(ctx, p.line, orig) {
			return written, fmt.Errorf("write status of ModelLine %s: %w", key, err)
		}
	}
	r.written.Store(key, p.line.ResourceVersion)
	return written, nil
}

// retryStatus writes the pass's status once more when its write met a line
// whose status is still the one the pass started from: someone changed
// only its metadata or spec meanwhile (an annotation, an edit). What the
// pass did outside (a version created, a Job started) is done, and a pass
// redone would not judge it again: its record is written now, against the
// line as it is, and the next pass (the change wakes it) takes the change.
// It reports whether the status was written.
func (r *Reconciler) retryStatus(ctx context.Context, line, orig *v1alpha1.ModelLine) bool {
	var now v1alpha1.ModelLine
	if err := r.APIReader.Get(ctx, client.ObjectKeyFromObject(line), &now); err != nil || !equality.Semantic.DeepEqual(now.Status, orig.Status) {
		return false
	}
	base := orig.DeepCopy()
	base.ResourceVersion = now.ResourceVersion
	line.ResourceVersion = now.ResourceVersion
	return r.Status().Patch(ctx, line, client.MergeFromWithOptions(base, client.MergeFromWithOptimisticLock{})) == nil
}

// requeue turns the pass's wake time into the real time to wait.
func (r *Reconciler) requeue(p *pass) time.Duration {
	if p.wake.IsZero() {
		return 0
	}
	d := r.Clock.Delay(p.wake.Sub(p.now.Time))
	if d < time.Second {
		d = time.Second
	}
	return d
}

// conflictRetry is how soon a pass whose write raced another change is
// redone.
const conflictRetry = 200 * time.Millisecond

// permissionRetry is how often a line the API server refuses the manager a
// request for is tried again (real time).
const permissionRetry = 30 * time.Second

// denied writes only the Ready condition of a line the manager could not
// even read the parts of (a list or get refused), and tries again calmly.
func (r *Reconciler) denied(ctx context.Context, orig, line *v1alpha1.ModelLine, err error) (ctrl.Result, error) {
	p := &pass{now: metav1.NewTime(r.Clock.Now()), line: line, vw: &view{}}
	changed := setAttention(line, setupProblem(lineObservation{}, err), nil, p.now)
	if _, err := r.write(ctx, p, orig, nil); err != nil {
		return ctrl.Result{}, err
	}
	if changed {
		r.eventForReady(orig, line)
	}
	return ctrl.Result{RequeueAfter: permissionRetry}, nil
}

// fresh makes sure the pass starts from the line as it is after this
// controller's own last write: the cache can lag behind it, and a pass on a
// stale copy would redo what was done. When the cached copy is not the one
// last seen, the line is read from the API server, and the copy read is
// remembered as the newest: an edit by someone else costs one read, not one
// per pass from then on.
//
// cached is the cache's own copy and is not changed: a newer line is read
// into an object of its own.
func (r *Reconciler) fresh(ctx context.Context, cached *v1alpha1.ModelLine) (*v1alpha1.ModelLine, error) {
	key := client.ObjectKeyFromObject(cached)
	rv, ok := r.written.Load(key)
	if !ok || rv == cached.ResourceVersion {
		return cached, nil
	}
	var line v1alpha1.ModelLine
	if err := r.APIReader.Get(ctx, key, &line); err != nil {
		return nil, fmt.Errorf("read ModelLine %s: %w", key, err)
	}
	r.written.Store(key, line.ResourceVersion)
	return &line, nil
}

// counts are the pass's per-line counts to add: none unless every per-line
// series is exported (--line-metrics=all).
func (r *Reconciler) counts(p *pass) []count {
	if r.LineMetrics != LineMetricsAll {
		return nil
	}
	return p.metrics
}

// emit sends the pass's events. With only set, only the events about those
// versions, or related to them, go out (what happened to them is recorded;
// the rest was not and will be recomputed).
func (r *Reconciler) emit(p *pass, only map[string]bool) {
	about := func(o runtime.Object) bool {
		v, ok := o.(*v1alpha1.ModelVersion)
		return ok && only[v.Name]
	}
	for _, e := range p.events {
		if only != nil && !about(e.regarding) && !about(e.related) {
			continue
		}
		r.Recorder.Eventf(e.regarding, e.related, e.kind, e.reason, e.action, "%s", e.message)
	}
}

// writeVersions writes the status of each version the pass changed, once.
func (r *Reconciler) writeVersions(ctx context.Context, vw *view, before map[string]v1alpha1.ModelVersionStatus) (map[string]bool, error) {
	written := map[string]bool{}
	for _, v := range vw.versions {
		if v.DeletionTimestamp != nil {
			continue
		}
		old := before[v.Name] // a version created in this pass had none
		if versionStatusEqual(&old, &v.Status) {
			continue
		}
		v.Status.ObservedGeneration = v.Generation
		// The patch's base is only marshalled: a shallow copy will do. The
		// answer is decoded into the object written: a deep copy, as the
		// working copy shares its maps and pointers with the cache.
		base := *v
		base.Status = old
		patched := v.DeepCopy()
		if err := r.Status().Patch(ctx, patched, client.MergeFromWithOptions(&base, client.MergeFromWithOptimisticLock{})); err != nil {
			return written, fmt.Errorf("write status of ModelVersion %s/%s: %w", v.Namespace, v.Name, err)
		}
		*v = *patched
		written[v.Name] = true
	}
	return written, nil
}

// observe reads the serving Deployment, the line's versions and Jobs, and
// the rule-based fallback.
func (r *Reconciler) observe(ctx context.Context, line *v1alpha1.ModelLine) (lineObservation, *view, error) {
	obs := lineObservation{problems: r.specs.problems(line)}
	vw := &view{jobs: map[string]*batchv1.Job{}}

	var dep appsv1.Deployment
	key := types.NamespacedName{Namespace: line.Namespace, Name: line.Spec.Serving.DeploymentName}
	switch err := r.Get(ctx, key, &dep, client.UnsafeDisableDeepCopy); { // read only: patchServing patches a copy
	case apierrors.IsNotFound(err):
		obs.servingMissing = fmt.Sprintf("Deployment %q (spec.serving.deploymentName) does not exist in namespace %q; the line waits for it", key.Name, key.Namespace)
		if r.ServingSelector != "" {
			obs.servingMissing += fmt.Sprintf(" (the manager sees only Deployments matching --serving-selector %s: label it so, if it exists)", r.ServingSelector)
		}
	case err != nil:
		return obs, nil, fmt.Errorf("get serving Deployment %s: %w", key, err)
	default:
		obs.servingMissing = missingContainer(&dep, line.Spec.Serving.ContainerName)
		vw.deployment = &dep
	}

	// The cache's own copies, read without copying them: their statuses
	// are the "before" the pass's writes are computed against, and the
	// pass works on a working copy of each.
	var versions v1alpha1.ModelVersionList
	if err := r.List(ctx, &versions, client.InNamespace(line.Namespace), client.MatchingFields{index.VersionLine: line.Name}, client.UnsafeDisableDeepCopy); err != nil {
		return obs, nil, fmt.Errorf("list versions of %s: %w", line.Name, err)
	}
	vw.before = make(map[string]v1alpha1.ModelVersionStatus, len(versions.Items))
	for i := range versions.Items {
		shared := &versions.Items[i]
		vw.before[shared.Name] = shared.Status
		vw.versions = append(vw.versions, workingCopy(shared))
	}
	byAge(vw.versions)
	if r.History != nil {
		hist := index.HistoryList()
		if err := r.History.List(ctx, hist, client.InNamespace(line.Namespace), client.MatchingFields{index.HistoryLine: line.Name}, client.UnsafeDisableDeepCopy); err != nil {
			return obs, nil, fmt.Errorf("list history versions of %s: %w", line.Name, err)
		}
		for i := range hist.Items {
			h := hist.Items[i] // a copy: pruning marks it deleted
			vw.history = append(vw.history, &h)
		}
	}

	var jobs batchv1.JobList
	if err := r.List(ctx, &jobs, client.InNamespace(line.Namespace), client.MatchingLabels{v1alpha1.LineLabel: labelValue(line.Name)}); err != nil {
		return obs, nil, fmt.Errorf("list Jobs of %s: %w", line.Name, err)
	}
	for i := range jobs.Items {
		vw.jobs[jobs.Items[i].Name] = &jobs.Items[i]
	}

	if name := ruleBasedName(line); name != "" {
		switch v := vw.version(name); {
		case v == nil:
			// Not of this line, or not there: look it up to say which.
			var other v1alpha1.ModelVersion
			err := r.Get(ctx, types.NamespacedName{Namespace: line.Namespace, Name: name}, &other)
			switch {
			case apierrors.IsNotFound(err):
				obs.fallbackMissing = fmt.Sprintf("ModelVersion %q (spec.fallback.ruleBasedVersion) does not exist; create it with source RuleBased and line %q", name, line.Name)
			case err != nil:
				return obs, nil, fmt.Errorf("get fallback ModelVersion %s: %w", name, err)
			default:
				obs.problems = append(obs.problems, fallbackProblems(line.Name, &other)...)
			}
		default:
			obs.problems = append(obs.problems, fallbackProblems(line.Name, v)...)
		}
	}
	return obs, vw, nil
}

func ruleBasedName(line *v1alpha1.ModelLine) string {
	if line.Spec.Fallback == nil {
		return ""
	}
	return line.Spec.Fallback.RuleBasedVersion
}

// missingContainer explains why a Deployment cannot serve the line's model,
// or returns "" when it has the container.
func missingContainer(dep *appsv1.Deployment, container string) string {
	var names []string
	for _, c := range dep.Spec.Template.Spec.Containers {
		if c.Name == container {
			return ""
		}
		names = append(names, c.Name)
	}
	sort.Strings(names)
	return fmt.Sprintf("Deployment %q has no container %q (spec.serving.containerName); its containers are: %s", dep.Name, container, strings.Join(names, ", "))
}

// fallbackProblems checks that the version named as the rule-based fallback
// is one.
func fallbackProblems(line string, v *v1alpha1.ModelVersion) []speccheck.Problem {
	var ps []speccheck.Problem
	if v.Spec.Source != v1alpha1.SourceRuleBased {
		ps = append(ps, speccheck.Problem{Field: "spec.fallback.ruleBasedVersion", Message: fmt.Sprintf("ModelVersion %q has source %s; a fallback must have source RuleBased", v.Name, v.Spec.Source)})
	}
	if v.Spec.Line != line {
		ps = append(ps, speccheck.Problem{Field: "spec.fallback.ruleBasedVersion", Message: fmt.Sprintf("ModelVersion %q belongs to line %q, not this one", v.Name, v.Spec.Line)})
	}
	return ps
}

// eventForReady tells of a change of Ready: a setup problem as a warning
// (what else makes a line unready has events of its own), its end,
// suspension, and readiness regained.
func (r *Reconciler) eventForReady(orig, line *v1alpha1.ModelLine) {
	was := meta.FindStatusCondition(orig.Status.Conditions, v1alpha1.ConditionReady)
	c := meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionReady)
	wasSetup := was != nil && was.Status == metav1.ConditionFalse && isSetupReason(was.Reason)
	switch {
	case c == nil:
	case c.Status == metav1.ConditionFalse && isSetupReason(c.Reason):
		r.Recorder.Eventf(line, nil, "Warning", c.Reason, "CheckSpec", "%s", c.Message)
	case c.Status == metav1.ConditionTrue && was != nil && was.Status == metav1.ConditionFalse:
		r.Recorder.Eventf(line, nil, "Normal", c.Reason, "CheckSpec", "the line is ready: %s", c.Message)
	case wasSetup:
		r.Recorder.Eventf(line, nil, "Normal", c.Reason, "CheckSpec", "%s is resolved; not ready yet: %s", was.Reason, c.Message)
	case c.Reason == v1alpha1.ReasonSuspended:
		r.Recorder.Eventf(line, nil, "Normal", c.Reason, "CheckSpec", "%s", c.Message)
	}
}

// SetupWithManager registers the reconciler and its watches. The indexes
// it lists by are registered by index.Register.
func (r *Reconciler) SetupWithManager(mgr ctrl.Manager, workers int) error {
	return ctrl.NewControllerManagedBy(mgr).
		Named("modelline").
		WithOptions(controller.Options{MaxConcurrentReconciles: workers, LogConstructor: requestLogger(mgr.GetLogger())}).
		// Status writes do not change the generation, so they do not wake the
		// line again; annotations carry a person's requests.
		For(&v1alpha1.ModelLine{}, builder.WithPredicates(predicate.Or(predicate.GenerationChangedPredicate{}, predicate.AnnotationChangedPredicate{}))).
		Watches(&appsv1.Deployment{}, handler.EnqueueRequestsFromMapFunc(r.linesServedBy)).
		Watches(&v1alpha1.ModelVersion{}, handler.EnqueueRequestsFromMapFunc(lineOfVersion)).
		Watches(&batchv1.Job{}, handler.EnqueueRequestsFromMapFunc(r.lineOfJob)).
		Complete(r)
}

// linesServedBy maps a Deployment to the lines it serves.
func (r *Reconciler) linesServedBy(ctx context.Context, o client.Object) []reconcile.Request {
	var lines v1alpha1.ModelLineList
	if err := r.List(ctx, &lines, client.InNamespace(o.GetNamespace()), client.MatchingFields{index.ServingDeployment: o.GetName()}); err != nil {
		log.FromContext(ctx).Error(err, "list ModelLines served by Deployment", "deployment", client.ObjectKeyFromObject(o))
		return nil
	}
	reqs := make([]reconcile.Request, 0, len(lines.Items))
	for _, l := range lines.Items {
		reqs = append(reqs, reconcile.Request{NamespacedName: client.ObjectKeyFromObject(&l)})
	}
	return reqs
}

// lineOfJob maps a Job to the line that owns it (a check Job) or to the
// line of the version that owns it.
func (r *Reconciler) lineOfJob(ctx context.Context, o client.Object) []reconcile.Request {
	owner := metav1.GetControllerOf(o)
	if owner == nil || owner.APIVersion != v1alpha1.GroupVersion.String() {
		return nil
	}
	if owner.Kind == "ModelLine" {
		return []reconcile.Request{{NamespacedName: types.NamespacedName{Namespace: o.GetNamespace(), Name: owner.Name}}}
	}
	if owner.Kind != "ModelVersion" {
		return nil
	}
	var v v1alpha1.ModelVersion
	if err := r.Get(ctx, types.NamespacedName{Namespace: o.GetNamespace(), Name: owner.Name}, &v); err != nil {
		return nil
	}
	return lineOfVersion(ctx, &v)
}

// lineOfVersion maps a ModelVersion to its line.
func lineOfVersion(_ context.Context, o client.Object) []reconcile.Request {
	v, ok := o.(*v1alpha1.ModelVersion)
	if !ok || v.Spec.Line == "" {
		return nil
	}
	return []reconcile.Request{{NamespacedName: types.NamespacedName{Namespace: v.Namespace, Name: v.Spec.Line}}}
}
