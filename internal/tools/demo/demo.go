// Package demo plays the Larkspur Parcels story on a simulated cluster on
// loopback: a real kube-apiserver, etcd, kube-controller-manager and
// kube-scheduler with kwok's simulated nodes (internal/simcluster), a real
// Prometheus, and the plumbline manager running in-process. Training and
// evaluation run for real: the demo's executor runs the Jobs' containers as
// local processes of the plumbline binary (`plumbline demo train` fits a
// logistic regression on synthetic parcels, `plumbline evaluate` gates it),
// and a serving simulator scores synthetic traffic with whatever model the
// scorer Deployment's pods serve. It prints a timeline read from the
// resources' conditions and events, ends with a summary, and leaves nothing
// running.
//
// Larkspur Parcels is a fictional courier; every name and number is invented
// and every parcel synthetic. The executor and the serving simulator exist
// for the demo only: in a cluster the kubelet runs the Jobs and the team's
// own monitoring feeds Prometheus.
package demo

import (
	"bytes"
	"context"
	_ "embed"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"text/template"
	"time"

	eventsv1 "k8s.io/api/events/v1"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"
	"k8s.io/apimachinery/pkg/types"
	utilyaml "k8s.io/apimachinery/pkg/util/yaml"
	ctrl "sigs.k8s.io/controller-runtime"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/log/zap"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/controllers/modelline"
	"plumbline.dev/plumbline/internal/manager"
	"plumbline.dev/plumbline/internal/testenv/promserver"
	"plumbline.dev/plumbline/internal/testenv/simcluster"
)

//go:embed larkspur.yaml
var manifests string

// Options say where the demo finds what it needs.
type Options struct {
	// CRDDir holds the CRD manifests.
	CRDDir string
	// AssetsDir holds the simulated cluster's binaries.
	AssetsDir string
	// WorkDir receives the kubeconfig, the logs, the models and the pods'
	// working directories.
	WorkDir string
	// Binary is the plumbline binary the Jobs run; empty means this one.
	Binary string
	// Short skips the opening steps about mistakes in a spec and the pauses
	// that let a watcher read along (the CI test).
	Short bool
	// StepTimeout bounds each wait; zero means 3 minutes.
	StepTimeout time.Duration
}

// Result is what happened, for the CI test to judge.
type Result struct {
	// Blocked: a retrain was refused for a data-quality breach.
	Blocked bool
	// Promoted are the versions that went live after a completed rollout,
	// in order.
	Promoted []string
	// WarnedEarly: the early warning named the peak's drifted input before
	// the quality trigger fired.
	WarnedEarly bool
	// GuardWaited: the guard waited for the peak version's own outcomes
	// before judging it.
	GuardWaited bool
	// RolledBack are the versions the guard rolled back.
	RolledBack []string
	// Live is the line's live version at the end.
	Live string
	// Jobs counts the Jobs per version and role ("late-risk-v1/train"), and
	// the line's check Jobs by name.
	Jobs map[string]int
	// PodRuns counts the pods the executor ran per Job.
	PodRuns map[string]int
	// ServedBy counts the parcels each version scored.
	ServedBy map[string]int
}

const (
	namespace = "larkspur"
	lineName  = "late-risk"
	scorer    = "late-risk-scorer"
)

// Run plays the demo. It returns nil when every step went as told.
func Run(ctx context.Context, o Options, out io.Writer) (*Result, error) {
	if o.StepTimeout == 0 {
		o.StepTimeout = 3 * time.Minute
	}
	if o.Binary == "" {
		exe, err := os.Executable()
		if err != nil {
			return nil, fmt.Errorf("find the plumbline binary: %w", err)
		}
		o.Binary = exe
	}
	work, err := filepath.Abs(o.WorkDir)
	if err != nil {
		return nil, fmt.Errorf("work directory %q: %w", o.WorkDir, err)
	}
	// Clear what an earlier run left, and only that: the work directory
	// may hold other files.
	for _, f := range []string{"cluster", "prometheus", "models", "pods", "world.json", "manager.log"} {
		if err := os.RemoveAll(filepath.Join(work, f)); err != nil {
			return nil, fmt.Errorf("clear %s: %w", filepath.Join(work, f), err)
		}
	}
	if err := os.MkdirAll(work, 0o755); err != nil {
		return nil, fmt.Errorf("create work directory: %w", err)
	}
	d := &player{ctx: ctx, out: out, timeout: o.StepTimeout, short: o.Short, start: time.Now(), seen: map[types.UID]bool{},
		work: work, worldPath: filepath.Join(work, worldFile), models: filepath.Join(work, modelsDir), result: &Result{}}

	d.say("plumbline demo: Larkspur Parcels, a fictional courier. Every name, number and parcel here is synthetic.")
	d.say("Starting a simulated cluster on loopback: etcd, kube-apiserver, kube-controller-manager and")
	d.say("kube-scheduler built from source, and kwok's simulated nodes (they run no containers) ...")
	cluster, err := simcluster.Start(ctx, simcluster.Options{AssetsDir: o.AssetsDir, CRDDir: o.CRDDir, WorkDir: filepath.Join(work, "cluster")})
	if err != nil {
		return nil, err
	}
	defer func() {
		d.say("Stopping the manager, Prometheus and the cluster.")
		if err := cluster.Stop(); err != nil {
			fmt.Fprintf(out, "demo: %v\n", err)
		}
	}()
	scheme, err := manager.Scheme()
	if err != nil {
		return nil, err
	}
	if d.c, err = client.New(cluster.Config, client.Options{Scheme: scheme}); err != nil {
		return nil, fmt.Errorf("create client: %w", err)
	}
	d.say("Cluster up with the plumbline CRDs installed. To watch along in another terminal:")
	fmt.Fprintf(out, "\n    export KUBECONFIG=%s\n    kubectl get modellines,modelversions,jobs,pods -n %s -w\n", cluster.KubeconfigPath, namespace)
	fmt.Fprintf(out, "    kubectl plumbline status %s -n %s    # with bin/ (kubectl-plumbline) on the PATH\n\n", lineName, namespace)

	if err := d.prepareWorld(); err != nil {
		return nil, err
	}
	// Everything below runs until the story ends; stop it before the
	// cluster (the deferred calls run last-registered first).
	rctx, stopRunning := context.WithCancel(ctx)
	var running []chan struct{}
	defer func() {
		stopRunning()
		for _, ch := range running {
			<-ch
		}
	}()
	goRun := func(f func(context.Context)) {
		ch := make(chan struct{})
		running = append(running, ch)
		go func() { defer close(ch); f(rctx) }()
	}

	d.sim = newServingSim(d.c, namespace, d.phaseNow, d.reference, d.world.Seed)
	simAddr, err := d.sim.serve(rctx)
	if err != nil {
		return nil, err
	}
	goRun(d.sim.run)
	prom, err := promserver.StartScraping(filepath.Join(work, "prometheus"), time.Second, simAddr)
	if err != nil {
		return nil, err
	}
	defer prom.Stop()
	d.say(fmt.Sprintf("Serving simulator (demo only) exports Larkspur's monitoring at http://%s/metrics; Prometheus %s scrapes it every second.", simAddr, prom.URL))

	logPath := filepath.Join(work, "manager.log")
	logFile, err := os.Create(logPath)
	if err != nil {
		return nil, fmt.Errorf("create manager log: %w", err)
	}
	defer logFile.Close()
	ctrl.SetLogger(zap.New(zap.WriteTo(logFile)))
	metricsAddr, err := promserver.FreeLoopbackAddr()
	if err != nil {
		return nil, err
	}
	mgr, err := manager.New(rctx, cluster.Config, manager.Options{MetricsAddr: metricsAddr, ProbeAddr: "0",
		PrometheusURL: prom.URL, AllowSecondManager: true,
		// The summary shows the per-line series.
		LineMetrics: modelline.LineMetricsAll})
	if err != nil {
		return nil, err
	}
	mgrDone := make(chan error, 1)
	goRun(func(ctx context.Context) { mgrDone <- mgr.Start(ctx) })
	d.say(fmt.Sprintf("plumbline manager running on the real clock (log: %s, metrics: http://%s/metrics).", logPath, metricsAddr))

	d.exec = newExecutor(d.c, namespace, o.Binary, filepath.Join(work, "pods"), d.say)
	goRun(d.exec.run)
	d.say("Executor (demo only) runs the Job pods' containers as local plumbline processes; logs under " + filepath.Join(work, "pods") + ".")

	if err := d.story(); err != nil {
		return d.result, err
	}
	if err := d.summary(metricsAddr); err != nil {
		return d.result, err
	}
	select {
	case err := <-mgrDone:
		return d.result, fmt.Errorf("the manager stopped during the demo: %w", err)
	default:
	}
	return d.result, nil
}

// player keeps the demo's state and prints its timeline.
type player struct {
	ctx     context.Context
	c       client.Client
	out     io.Writer
	timeout time.Duration
	short   bool
	start   time.Time

	work, worldPath, models string
	world                   *World
	reference               []Parcel
	sim                     *servingSim
	exec                    *executor
	result                  *Result
	// seen are the events already printed.
	seen map[types.UID]bool
}

func (d *player) say(msg string) {
	el := time.Since(d.start).Round(time.Second)
	fmt.Fprintf(d.out, "[%02d:%02d] %s\n", int(el.Minutes()), int(el.Seconds())%60, msg)
}

func (d *player) step(n int, title string) {
	fmt.Fprintf(d.out, "\n== %d. %s\n", n, title)
}

// prepareWorld writes the world's first phase, the model Larkspur trained
// before adopting plumbline (the Imported version) and its old rules (the
// fallback), and keeps the reference parcels the monitoring compares
// against.
func (d *player) prepareWorld() error {
	w, err := PrepareWorld(d.work, time.Now())
	if err != nil {
		return err
	}
	d.world, d.reference = w, referenceOf(w)
	return nil
}

func (d *player) uri(version string) string {
	return "file://" + filepath.Join(d.models, version+".json")
}

func (d *player) phaseNow() Phase { return d.world.PhaseAt(time.Now()) }

// changeWorld starts a new phase now. A phase whose feed is fixed has the
// addresses the feed lost restored (backfilled) in the data read later.
func (d *player) changeWorld(p Phase) error {
	p.At = time.Now()
	d.world.Change(p)
	d.say("WORLD: " + p.Note)
	return d.world.Save(d.worldPath)
}

// story applies the manifests and walks through what the controller says.
func (d *player) story() error {
	objs, err := d.objects()
	if err != nil {
		return err
	}
	byKind := func(kind string) []*unstructured.Unstructured {
		var l []*unstructured.Unstructured
		for _, o := range objs {
			if o.GetKind() == kind {
				l = append(l, o)
			}
		}
		return l
	}
	lineKey := types.NamespacedName{Namespace: namespace, Name: lineName}

	d.step(1, "Larkspur's scorer runs its old rules; the ModelLine and the versions are applied")
	fmt.Fprintln(d.out, "   Time is compressed: trigger and guard windows are 20 seconds (hours, in the")
	fmt.Fprintln(d.out, "   story). Quality is the ROC AUC of the served scores over the last 2,000 parcels")
	fmt.Fprintln(d.out, "   whose outcome is known: a parcel is known to be late when it is delivered, 10")
	fmt.Fprintln(d.out, "   seconds (hours) after it was scored. The inputs are known at once.")
	for _, o := range append(byKind("Namespace"), byKind("Deployment")...) {
		if err := d.create(o); err != nil {
			return err
		}
	}
	if !d.short {
		bad := byKind("ModelLine")[0].DeepCopy()
		bad.SetName("late-risk-typo")
		if err := setTrigger(bad, "forSeconds", int64(5)); err != nil {
			return err
		}
		if err := d.c.Create(d.ctx, bad); err == nil {
			return errors.New("the API server accepted a trigger with forSeconds < everySeconds; its CEL rule is missing")
		} else {
			d.say("A typo first, a trigger window shorter than its period; kubectl apply would print: " + firstLine(err.Error()))
		}
	}
	for _, o := range append(byKind("ModelLine"), byKind("ModelVersion")...) {
		if err := d.create(o); err != nil {
			return err
		}
	}
	d.step(2, "The imported model becomes the first live version through a real Deployment rollout")
	if err := d.waitLive("late-risk-v0"); err != nil {
		return err
	}
	if err := d.waitReady(lineKey, metav1.ConditionTrue, v1alpha1.ReasonServing); err != nil {
		return err
	}
	if err := d.pause(12*time.Second, "ordinary traffic: the live model holds its quality"); err != nil {
		return err
	}
	// In the story the imported model has served for weeks before Fenwick
	// opens: past its probation, the guard only reports a drop.
	if err := d.probationEnds(lineKey); err != nil {
		return err
	}

	d.step(3, "The new Fenwick depot opens, and the same day the address feed breaks")
	if err := d.changeWorld(Phase{Fenwick: true, FeedBroken: true,
		Note: "the Fenwick depot opens (40% of parcels, rural routes) and the address feed loses 30% of addresses"}); err != nil {
		return err
	}
	if err := d.waitLine(lineKey, "a retrain refused on broken data", func(line *v1alpha1.ModelLine) (bool, error) {
		c := meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionBlocked)
		if c == nil || c.Status != metav1.ConditionTrue || c.Reason != "DataQualityIssue" {
			return false, nil
		}
		d.result.Blocked = true
		d.say("ModelLine late-risk is Blocked (DataQualityIssue): " + c.Message)
		return true, nil
	}); err != nil {
		return err
	}
	if err := d.pause(10*time.Second, "no retrain while the feed is broken, though the trigger keeps firing"); err != nil {
		return err
	}

	d.step(4, "The address feed is fixed: the trigger still fires, the checks pass, a retrain runs")
	if err := d.changeWorld(Phase{Fenwick: true, Note: "the address feed is fixed, and its vendor backfills the lost addresses"}); err != nil {
		return err
	}
	if err := d.waitLive("late-risk-v1"); err != nil {
		return err
	}
	if err := d.pause(8*time.Second, "the retrained model knows Fenwick: quality recovers"); err != nil {
		return err
	}
	if err := d.probationEnds(lineKey); err != nil {
		return err
	}

	d.step(5, "The pre-holiday peak: heavy parcels everywhere; quality falls again and a retrain learns the peak")
	if err := d.changeWorld(Phase{Fenwick: true, Peak: true, Note: "the pre-holiday peak starts: heavy parcels, vans fill up, town routes jam"}); err != nil {
		return err
	}
	if err := d.earlyWarning(lineKey, "weight-shift"); err != nil {
		return err
	}
	peakVersion, err := d.waitNewLive(lineKey, "late-risk-v1")
	if err != nil {
		return err
	}

	d.step(6, "The peak ends the day "+peakVersion+" goes live: it regresses in production and the guard rolls it back")
	if err := d.changeWorld(Phase{Fenwick: true, Note: "the peak ends: ordinary traffic again"}); err != nil {
		return err
	}
	if err := d.waitLine(lineKey, "the guard to wait for "+peakVersion+"'s own outcomes", func(line *v1alpha1.ModelLine) (bool, error) {
		c := meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionDegraded)
		if line.Status.LiveVersion != peakVersion || c == nil || c.Reason != "AwaitingOwnLabels" {
			return false, nil
		}
		d.result.GuardWaited = true
		d.say("Degraded=False (AwaitingOwnLabels): " + c.Message)
		return true, nil
	}); err != nil {
		return err
	}
	if err := d.waitLine(lineKey, "the guard to roll "+peakVersion+" back to late-risk-v1", func(line *v1alpha1.ModelLine) (bool, error) {
		c := meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionFallbackActive)
		if c == nil || c.Status != metav1.ConditionTrue || line.Status.LiveVersion != "late-risk-v1" {
			return false, nil
		}
		var v v1alpha1.ModelVersion
		if err := d.c.Get(d.ctx, types.NamespacedName{Namespace: namespace, Name: "late-risk-v1"}, &v); err != nil {
			return false, err
		}
		if v.Status.Phase != v1alpha1.PhaseLive {
			return false, nil
		}
		d.result.RolledBack = append(d.result.RolledBack, peakVersion)
		d.result.Promoted = append(d.result.Promoted, "late-risk-v1")
		d.say(fmt.Sprintf("ModelLine late-risk: FallbackActive=True (%s), live version %s again after a completed rollout", c.Reason, line.Status.LiveVersion))
		return true, nil
	}); err != nil {
		return err
	}
	return d.pause(8*time.Second, "quality is back with late-risk-v1")
}

// earlyWarning waits for the line's InputsDrifted condition to name a
// drifted check, and tells whether the quality trigger had fired by then.
func (d *player) earlyWarning(key types.NamespacedName, check string) error {
	return d.waitLine(key, "the early warning on "+check, func(line *v1alpha1.ModelLine) (bool, error) {
		c := meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionInputsDrifted)
		if c == nil || c.Status != metav1.ConditionTrue || !strings.Contains(c.Message, check) {
			return false, nil
		}
		quality := "No quality trigger fires yet: these parcels' outcomes are not in"
		d.result.WarnedEarly = true
		for _, t := range line.Status.Triggers {
			if t.State == v1alpha1.TriggerFiring {
				quality = "Trigger " + t.Name + " fires already"
				d.result.WarnedEarly = false
			}
		}
		d.say(fmt.Sprintf("InputsDrifted=True (%s): %s. %s.", c.Reason, c.Message, quality))
		return true, nil
	})
}

// objects renders the demo's manifests for this run's files.
func (d *player) objects() ([]*unstructured.Unstructured, error) {
	tmpl, err := template.New("larkspur").Delims("[[", "]]").Parse(manifests)
	if err != nil {
		return nil, fmt.Errorf("demo manifests: %w", err)
	}
	var buf bytes.Buffer
	if err := tmpl.Execute(&buf, map[string]string{"Models": d.models, "World": d.worldPath}); err != nil {
		return nil, fmt.Errorf("demo manifests: %w", err)
	}
	dec := utilyaml.NewYAMLOrJSONDecoder(&buf, 4096)
	var objs []*unstructured.Unstructured
	for {
		var m map[string]any
		if err := dec.Decode(&m); err != nil {
			if errors.Is(err, io.EOF) {
				return objs, nil
			}
			return nil, fmt.Errorf("demo manifests: %w", err)
		}
		if len(m) > 0 {
			objs = append(objs, &unstructured.Unstructured{Object: m})
		}
	}
}

// pause lets the story breathe so a watcher can read along; the CI test
// skips it.
func (d *player) pause(p time.Duration, what string) error {
	if d.short {
		p /= 3
	}
	end := time.Now().Add(p)
	if err := d.wait(what, func() (bool, error) { return time.Now().After(end), nil }); err != nil {
		return err
	}
	d.say(fmt.Sprintf("%s (ROC AUC over the last 2,000 parcels: %.3f)", what, d.sim.currentAUC()))
	return nil
}

// probationEnds waits until the live version's probation is over: from
// then on the guard only reports a regression (Degraded) and never rolls
// back by itself.
func (d *player) probationEnds(key types.NamespacedName) error {
	var line v1alpha1.ModelLine
	if err := d.c.Get(d.ctx, key, &line); err != nil {
		return fmt.Errorf("get line: %w", err)
	}
	if line.Spec.Guard == nil || line.Status.LastPromotionTime == nil {
		return nil
	}
	end := line.Spec.ProbationEnd(line.Status.LastPromotionTime.Time)
	d.say(fmt.Sprintf("waiting for %s's probation (spec.guard.probationSeconds: %ds) to end at %s",
		line.Status.LiveVersion, line.Spec.Guard.ProbationSeconds, end.Format("15:04:05")))
	return d.wait("the probation to end", func() (bool, error) { return time.Now().After(end.Add(time.Second)), nil })
}

// waitNewLive waits until the line's live version is another than old,
// and returns it. (A candidate may be rejected by the gate first; the
// trigger then retrains again after the cooldown.)
func (d *player) waitNewLive(key types.NamespacedName, old string) (string, error) {
	var live string
	if err := d.waitLine(key, "a version newer than "+old+" to go live", func(line *v1alpha1.ModelLine) (bool, error) {
		live = line.Status.LiveVersion
		return live != "" && live != old, nil
	}); err != nil {
		return "", err
	}
	return live, d.waitLive(live)
}

// waitLive waits until a version is Live after a completed rollout.
func (d *player) waitLive(name string) error {
	if err := d.wait(fmt.Sprintf("version %s to be Live", name), func() (bool, error) {
		var v v1alpha1.ModelVersion
		if err := d.c.Get(d.ctx, types.NamespacedName{Namespace: namespace, Name: name}, &v); err != nil {
			return false, client.IgnoreNotFound(err)
		}
		return v.Status.Phase == v1alpha1.PhaseLive, nil
	}); err != nil {
		return err
	}
	d.result.Promoted = append(d.result.Promoted, name)
	d.say(fmt.Sprintf("ModelVersion %s is Live: the scorer Deployment finished rolling it out", name))
	return nil
}

func (d *player) create(o *unstructured.Unstructured) error {
	if err := d.c.Create(d.ctx, o.DeepCopy()); err != nil {
		return fmt.Errorf("create %s %s: %w", o.GetKind(), o.GetName(), err)
	}
	d.say(fmt.Sprintf("applied %s %s", o.GetKind(), o.GetName()))
	return nil
}

// waitReady prints events until the line's Ready condition is as wanted.
func (d *player) waitReady(key types.NamespacedName, status metav1.ConditionStatus, reason string) error {
	return d.waitLine(key, fmt.Sprintf("line %s to be Ready=%s (%s)", key.Name, status, reason), func(line *v1alpha1.ModelLine) (bool, error) {
		c := meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionReady)
		if c == nil || c.Status != status || c.Reason != reason {
			return false, nil
		}
		d.say(fmt.Sprintf("ModelLine %s is Ready=%s (%s)", key.Name, c.Status, c.Reason))
		return true, nil
	})
}

// waitLine polls done with the line as it is now, until it says done.
func (d *player) waitLine(key types.NamespacedName, what string, done func(*v1alpha1.ModelLine) (bool, error)) error {
	return d.wait(what, func() (bool, error) {
		var line v1alpha1.ModelLine
		if err := d.c.Get(d.ctx, key, &line); err != nil {
			return false, err
		}
		return done(&line)
	})
}

// wait polls done, printing new events, until it says true or the step
// times out.
func (d *player) wait(what string, done func() (bool, error)) error {
	deadline := time.Now().Add(d.timeout)
	for {
		if err := d.printEvents(); err != nil {
			return err
		}
		ok, err := done()
		if err != nil {
			return fmt.Errorf("waiting for %s: %w", what, err)
		}
		if ok {
			return nil
		}
		if time.Now().After(deadline) {
			return fmt.Errorf("gave up after %s waiting for %s", d.timeout, what)
		}
		select {
		case <-d.ctx.Done():
			return fmt.Errorf("interrupted while waiting for %s", what)
		case <-time.After(250 * time.Millisecond):
		}
	}
}

// shown says whether the timeline shows an event: everything plumbline says
// about its resources, and the Job and Deployment controllers' words about
// the demo's Jobs and the scorer's rollouts.
func shown(e *eventsv1.Event) bool {
	switch e.Regarding.Kind {
	case "ModelLine", "ModelVersion":
		return true
	case "Job":
		return e.Reason == "Completed" || e.Reason == "BackoffLimitExceeded" || e.Reason == "DeadlineExceeded"
	case "Deployment":
		return e.Reason == "ScalingReplicaSet"
	}
	return false
}

// EventTime is when an event happened, whichever of its times the
// recorder set.
func EventTime(e *eventsv1.Event) time.Time {
	switch {
	case !e.EventTime.IsZero():
		return e.EventTime.Time
	case !e.DeprecatedLastTimestamp.IsZero():
		return e.DeprecatedLastTimestamp.Time
	}
	return e.CreationTimestamp.Time
}

// printEvents prints the namespace's events not printed yet, oldest first.
func (d *player) printEvents() error {
	var list eventsv1.EventList
	if err := d.c.List(d.ctx, &list, client.InNamespace(namespace)); err != nil {
		return fmt.Errorf("list events: %w", err)
	}
	sort.SliceStable(list.Items, func(i, j int) bool { return EventTime(&list.Items[i]).Before(EventTime(&list.Items[j])) })
	for i := range list.Items {
		e := &list.Items[i]
		if d.seen[e.UID] {
			continue
		}
		d.seen[e.UID] = true
		if !shown(e) {
			continue
		}
		d.say(fmt.Sprintf("event %s %s %s/%s: %s", e.Type, e.Reason, e.Regarding.Kind, e.Regarding.Name, e.Note))
		if e.Reason == "GatePassed" || e.Reason == "GateFailed" {
			d.printGateTable(e.Regarding.Name)
		}
	}
	return nil
}

// printGateTable shows the lines of plumbline evaluate's table that the
// gate judged, from the evaluation pod's log.
func (d *player) printGateTable(version string) {
	logs, _ := filepath.Glob(filepath.Join(d.exec.dir, version+"-gate-*", "evaluate.log"))
	if len(logs) == 0 {
		return
	}
	sort.Strings(logs)
	b, err := os.ReadFile(logs[len(logs)-1])
	if err != nil {
		return
	}
	for _, l := range strings.Split(string(b), "\n") {
		if strings.Contains(l, "roc_auc") || strings.HasPrefix(strings.TrimSpace(l), "SEGMENT") {
			fmt.Fprintln(d.out, "        "+l)
		}
	}
}

func setTrigger(o *unstructured.Unstructured, field string, v any) error {
	triggers, _, err := unstructured.NestedSlice(o.Object, "spec", "triggers")
	if err != nil || len(triggers) == 0 {
		return fmt.Errorf("demo line has no triggers")
	}
	triggers[0].(map[string]any)[field] = v
	return unstructured.SetNestedSlice(o.Object, triggers, "spec", "triggers")
}

func orDash(s string) string {
	if s == "" {
		return "-"
	}
	return s
}

func firstLine(s string) string {
	if i := strings.IndexByte(s, '\n'); i >= 0 {
		return s[:i]
	}
	return s
}
