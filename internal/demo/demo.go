// Package demo plays the Larkspur Parcels story on a local control plane: a
// real kube-apiserver and etcd on loopback with plumbline's CRDs, and the
// plumbline manager running in-process. It prints a timeline read from the
// resources' conditions and events, ends with a summary, and leaves nothing
// running.
//
// Larkspur Parcels is a fictional courier; every name and number is invented.
package demo

import (
	"context"
	"errors"
	"fmt"
	"io"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"text/tabwriter"
	"time"

	appsv1 "k8s.io/api/apps/v1"
	eventsv1 "k8s.io/api/events/v1"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"
	"k8s.io/apimachinery/pkg/types"
	utilyaml "k8s.io/apimachinery/pkg/util/yaml"
	clocktesting "k8s.io/utils/clock/testing"
	ctrl "sigs.k8s.io/controller-runtime"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/log/zap"
	ctrlmetrics "sigs.k8s.io/controller-runtime/pkg/metrics"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/clock"
	"plumbline.dev/plumbline/internal/controlplane"
	"plumbline.dev/plumbline/internal/manager"
	"plumbline.dev/plumbline/internal/promserver"
	"plumbline.dev/plumbline/internal/standin"
)

// Options say where the demo finds what it needs.
type Options struct {
	// CRDDir holds the CRD manifests.
	CRDDir string
	// SamplesDir holds the Larkspur sample manifests.
	SamplesDir string
	// AssetsDir holds kube-apiserver and etcd.
	AssetsDir string
	// WorkDir receives the kubeconfig and the manager's log.
	WorkDir string
	// StepTimeout bounds each wait for the controller; zero means 60s.
	StepTimeout time.Duration
}

const namespace = "larkspur"

// Run plays the demo. It returns nil when every step went as told.
func Run(ctx context.Context, o Options, out io.Writer) error {
	if o.StepTimeout == 0 {
		o.StepTimeout = 60 * time.Second
	}
	d := &player{out: out, timeout: o.StepTimeout, seen: map[types.UID]bool{}, clock: clocktesting.NewFakePassiveClock(storyStart)}
	work, err := filepath.Abs(o.WorkDir)
	if err != nil {
		return fmt.Errorf("work directory %q: %w", o.WorkDir, err)
	}
	d.work = work
	if err := os.MkdirAll(work, 0o755); err != nil {
		return fmt.Errorf("create work directory: %w", err)
	}

	d.say("plumbline demo: Larkspur Parcels, a fictional courier. Every name and number here is synthetic.")
	d.say("Starting a control plane on loopback (etcd and kube-apiserver built from source) ...")
	env, err := controlplane.Start(controlplane.Options{AssetsDir: o.AssetsDir, CRDDir: o.CRDDir, KubeconfigPath: filepath.Join(work, "kubeconfig")})
	if err != nil {
		return err
	}
	defer func() {
		d.say("Stopping the manager and the control plane.")
		if err := env.Stop(); err != nil {
			fmt.Fprintf(out, "demo: %v\n", err)
		}
	}()
	promDir := filepath.Join(work, "prometheus")
	if err := os.RemoveAll(promDir); err != nil {
		return fmt.Errorf("clear %s: %w", promDir, err)
	}
	d.say("Starting Prometheus with eleven days of synthetic Larkspur monitoring history ...")
	prom, err := promserver.Start(promDir, history())
	if err != nil {
		return err
	}
	defer prom.Stop()
	d.say("Control plane up, CRDs installed, Prometheus at " + prom.URL + ". To watch along in another terminal:")
	fmt.Fprintf(out, "\n    export KUBECONFIG=%s\n    kubectl get modellines,modelversions -n %s -w\n\n", env.KubeconfigPath, namespace)

	logPath := filepath.Join(work, "manager.log")
	logFile, err := os.Create(logPath)
	if err != nil {
		return fmt.Errorf("create manager log: %w", err)
	}
	defer logFile.Close()
	ctrl.SetLogger(zap.New(zap.WriteTo(logFile)))

	metricsAddr, err := freeLoopbackAddr()
	if err != nil {
		return err
	}
	mctx, stopManager := context.WithCancel(ctx)
	mgr, err := manager.New(mctx, env.Config, manager.Options{MetricsAddr: metricsAddr, ProbeAddr: "0",
		PrometheusURL: prom.URL, Clock: clock.Manual{PassiveClock: d.clock}})
	if err != nil {
		stopManager()
		return err
	}
	mgrDone := make(chan error, 1)
	go func() { mgrDone <- mgr.Start(mctx) }()
	defer func() {
		stopManager()
		if err := <-mgrDone; err != nil {
			fmt.Fprintf(out, "demo: manager: %v\n", err)
		}
	}()
	d.say(fmt.Sprintf("Manager running (log: %s, metrics: http://%s/metrics).", logPath, metricsAddr))

	scheme, err := manager.Scheme()
	if err != nil {
		return err
	}
	d.c, err = client.New(env.Config, client.Options{Scheme: scheme})
	if err != nil {
		return fmt.Errorf("create client: %w", err)
	}
	d.ctx = ctx

	if err := d.story(o.SamplesDir); err != nil {
		return err
	}
	if err := d.summary(metricsAddr); err != nil {
		return err
	}
	return nil
}

// player keeps the demo's state and prints its timeline.
type player struct {
	ctx     context.Context
	c       client.Client
	out     io.Writer
	timeout time.Duration
	// clock is the controller's clock; the demo moves it through the story,
	// and the timeline shows it.
	clock *clocktesting.FakePassiveClock
	// work holds the demo's files; seed varies the synthetic golden sets.
	work string
	seed uint64
	// seen are the events already printed.
	seen map[types.UID]bool
}

func (d *player) say(msg string) {
	fmt.Fprintf(d.out, "[%s] %s\n", d.clock.Now().Format("Mon 15:04"), msg)
}

func (d *player) step(n int, title string) {
	fmt.Fprintf(d.out, "\n== %d. %s\n", n, title)
}

// story applies the samples and walks through what the controller says.
func (d *player) story(samples string) error {
	objs, err := readDir(samples)
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
	lineKey := types.NamespacedName{Namespace: namespace, Name: "late-risk"}

	d.step(1, "Larkspur describes its late-delivery model as a ModelLine, before the scorer is deployed")
	for _, o := range append(byKind("Namespace"), byKind("ModelLine")...) {
		if err := d.create(o); err != nil {
			return err
		}
	}
	if err := d.waitReady(lineKey, metav1.ConditionFalse, v1alpha1.ReasonServingNotFound); err != nil {
		return err
	}

	d.step(2, "A mistake the API server refuses at once: a trigger window shorter than its period")
	bad := byKind("ModelLine")[0].DeepCopy()
	bad.SetName("late-risk-typo")
	if err := setTrigger(bad, "forSeconds", int64(60)); err != nil {
		return err
	}
	switch err := d.c.Create(d.ctx, bad); {
	case err == nil:
		return errors.New("the API server accepted a trigger with forSeconds < everySeconds; its CEL rule is missing")
	default:
		d.say("kubectl apply would print: " + firstLine(err.Error()))
	}

	d.step(3, "A mistake only the controller can see: a cron typo (\"Mon-Funday\") in the schedule")
	if err := d.setCron(lineKey, "30 2 * * Mon-Funday"); err != nil {
		return err
	}
	if err := d.waitReady(lineKey, metav1.ConditionFalse, v1alpha1.ReasonInvalidSpec); err != nil {
		return err
	}
	d.say("The controller does not retry an invalid spec in a loop: it waits for the next edit.")

	d.step(4, "The scorer Deployment and the versions arrive, and the schedule is fixed")
	for _, o := range append(byKind("Deployment"), byKind("ModelVersion")...) {
		if err := d.create(o); err != nil {
			return err
		}
	}
	if err := d.setCron(lineKey, "30 2 * * 1"); err != nil {
		return err
	}
	d.say(`fixed spec.schedule.cron to "30 2 * * 1" (Mondays at 02:30, Europe/London)`)
	if err := d.waitReady(lineKey, metav1.ConditionTrue, v1alpha1.ReasonSpecValid); err != nil {
		return err
	}
	if err := d.waitAdopted(lineKey, len(byKind("ModelVersion"))); err != nil {
		return err
	}
	return d.lifecycle(lineKey)
}

// lifecycle takes the line through its first promotion, a drop in quality
// that fires a trigger (first refused on broken data, then retrained and
// promoted), and a person's retrain that the gate rejects.
func (d *player) lifecycle(lineKey types.NamespacedName) error {
	fmt.Fprintln(d.out, "\n   This control plane runs no kubelet and no Job or Deployment controller, so the demo")
	fmt.Fprintln(d.out, "   plays their part: it finishes Jobs and rollouts the way they would. It also moves the")
	fmt.Fprintln(d.out, "   controller's clock through the story, and Prometheus answers from the backfilled history.")

	d.step(5, "The imported model becomes the first live version")
	if err := d.waitPhase("late-risk-v0", v1alpha1.PhasePromoting); err != nil {
		return err
	}
	if err := d.act("the scorer Deployment finishes its rollout", standin.RollOutVersion(d.ctx, d.c, namespace, scorer, "late-risk-v0", d.timeout)); err != nil {
		return err
	}
	if err := d.waitPhase("late-risk-v0", v1alpha1.PhaseLive); err != nil {
		return err
	}

	d.step(6, "Tuesday 02:00 the new Fenwick depot opens: quality falls, and the address feed breaks for a while")
	fmt.Fprintln(d.out, "   (the clock moves in quarter-hour steps; triggers and guard are judged on Prometheus at each)")
	started, err := d.fastForward(lineKey, storyStart.Add(30*time.Minute), time.Date(2026, 11, 3, 12, 0, 0, 0, time.UTC), func() (bool, error) {
		var v v1alpha1.ModelVersion
		err := d.c.Get(d.ctx, types.NamespacedName{Namespace: namespace, Name: "late-risk-v1"}, &v)
		return err == nil, client.IgnoreNotFound(err)
	})
	if err != nil {
		return err
	}
	if !started {
		return fmt.Errorf("the auc-drop trigger started no retrain by Tuesday noon")
	}
	if err := d.waitPhase("late-risk-v1", v1alpha1.PhaseTraining); err != nil {
		return err
	}
	d.clock.SetTime(time.Date(2026, 11, 3, 12, 40, 0, 0, time.UTC))
	if err := d.act("training Job late-risk-v1-train completes", standin.SucceedJob(d.ctx, d.c, namespace, "late-risk-v1-train", "")); err != nil {
		return err
	}
	if err := d.waitPhase("late-risk-v1", v1alpha1.PhaseEvaluating); err != nil {
		return err
	}
	d.clock.SetTime(time.Date(2026, 11, 3, 13, 10, 0, 0, time.UTC))
	if err := d.evaluateGate("late-risk-v1", "the candidate is better everywhere", false); err != nil {
		return err
	}
	if err := d.waitPhase("late-risk-v1", v1alpha1.PhasePromoting); err != nil {
		return err
	}
	d.clock.SetTime(time.Date(2026, 11, 3, 13, 20, 0, 0, time.UTC))
	if err := d.act("the scorer Deployment rolls out late-risk-v1", standin.RollOutVersion(d.ctx, d.c, namespace, scorer, "late-risk-v1", d.timeout)); err != nil {
		return err
	}
	if err := d.waitPhase("late-risk-v1", v1alpha1.PhaseLive); err != nil {
		return err
	}

	d.step(7, "Wednesday morning: an engineer asks for a retrain; the gate rejects it")
	if _, err := d.fastForward(lineKey, time.Date(2026, 11, 4, 10, 0, 0, 0, time.UTC), time.Date(2026, 11, 4, 10, 0, 0, 0, time.UTC), nil); err != nil {
		return err
	}
	if err := d.retrain(lineKey, "weekly-review-45", "late-risk-v2", time.Date(2026, 11, 4, 10, 40, 0, 0, time.UTC),
		"the candidate misses late parcels at the harbour depot", true); err != nil {
		return err
	}
	if err := d.waitPhase("late-risk-v2", v1alpha1.PhaseRejected); err != nil {
		return err
	}

	d.step(8, "Wednesday noon: another candidate passes the gate, goes live, and does badly in production")
	if err := d.retrain(lineKey, "weekly-review-45b", "late-risk-v3", time.Date(2026, 11, 4, 11, 50, 0, 0, time.UTC),
		"the candidate is better everywhere", false); err != nil {
		return err
	}
	if err := d.waitPhase("late-risk-v3", v1alpha1.PhasePromoting); err != nil {
		return err
	}
	d.clock.SetTime(time.Date(2026, 11, 4, 12, 0, 0, 0, time.UTC))
	if err := d.act("the scorer Deployment rolls out late-risk-v3", standin.RollOutVersion(d.ctx, d.c, namespace, scorer, "late-risk-v3", d.timeout)); err != nil {
		return err
	}
	if err := d.waitPhase("late-risk-v3", v1alpha1.PhaseLive); err != nil {
		return err
	}
	fmt.Fprintln(d.out, "   (the guard watches the hourly ROC AUC: below 0.76 for 30 minutes within 12 hours of the promotion rolls back)")
	rolling, err := d.fastForward(lineKey, time.Date(2026, 11, 4, 12, 15, 0, 0, time.UTC), time.Date(2026, 11, 4, 14, 0, 0, 0, time.UTC), func() (bool, error) {
		var v v1alpha1.ModelVersion
		if err := d.c.Get(d.ctx, types.NamespacedName{Namespace: namespace, Name: "late-risk-v1"}, &v); err != nil {
			return false, err
		}
		return v.Status.Phase == v1alpha1.PhasePromoting, nil
	})
	if err != nil {
		return err
	}
	if !rolling {
		return fmt.Errorf("the guard did not roll late-risk-v3 back")
	}
	if err := d.act("the scorer Deployment rolls back to late-risk-v1", standin.RollOutVersion(d.ctx, d.c, namespace, scorer, "late-risk-v1", d.timeout)); err != nil {
		return err
	}
	if err := d.waitPhase("late-risk-v1", v1alpha1.PhaseLive); err != nil {
		return err
	}
	// The line's own status follows its versions'.
	return d.wait("the line to say it fell back", func() (bool, error) {
		var line v1alpha1.ModelLine
		if err := d.c.Get(d.ctx, lineKey, &line); err != nil {
			return false, err
		}
		c := meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionFallbackActive)
		return c != nil && c.Status == metav1.ConditionTrue && line.Status.LiveVersion == "late-risk-v1", nil
	})
}

// retrain asks for a retrain with a token and plays its training and
// evaluation, the Jobs finishing at the given time; the evaluation runs
// plumbline evaluate on a synthetic golden set.
func (d *player) retrain(key types.NamespacedName, token, version string, at time.Time, what string, harbourDrop bool) error {
	if err := d.annotate(key, token); err != nil {
		return err
	}
	if err := d.waitPhase(version, v1alpha1.PhaseTraining); err != nil {
		return err
	}
	d.clock.SetTime(at)
	if err := d.act("training Job "+version+"-train completes", standin.SucceedJob(d.ctx, d.c, namespace, version+"-train", "")); err != nil {
		return err
	}
	if err := d.waitPhase(version, v1alpha1.PhaseEvaluating); err != nil {
		return err
	}
	d.clock.SetTime(at.Add(5 * time.Minute))
	return d.evaluateGate(version, what, harbourDrop)
}

// evaluateGate plays the version's evaluation Job: the scorer's predictions
// on the golden set are synthetic; plumbline evaluate, the Job's last
// container, runs for real on them.
func (d *player) evaluateGate(version, what string, harbourDrop bool) error {
	predictions := filepath.Join(d.work, version+"-predictions.parquet")
	d.seed++
	if err := writePredictions(predictions, d.seed, harbourDrop); err != nil {
		return fmt.Errorf("write synthetic predictions: %w", err)
	}
	var table string
	err := standin.RunLastContainer(d.ctx, d.c, namespace, version+"-gate", func(args []string, env map[string]string) (string, error) {
		msg, out, err := evaluateWith(d.work, predictions, args, env)
		table = out
		return msg, err
	})
	if err != nil {
		return err
	}
	d.say(fmt.Sprintf("(stand-in) evaluation Job %s-gate ran plumbline evaluate on a synthetic golden set (%s):", version, what))
	for _, l := range strings.Split(strings.TrimSpace(table), "\n") {
		if strings.Contains(l, "roc_auc") || strings.Contains(l, "recall") || strings.Contains(l, "log_loss") || strings.HasPrefix(l, "SEGMENT") || strings.HasPrefix(l, "must-pass") {
			fmt.Fprintln(d.out, "      "+l)
		}
	}
	return nil
}

// fastForward moves the controller's clock from one time to another in
// quarter-hour steps, waking the line at each and waiting until it has
// judged its triggers and guard there; it stops early when done says so.
func (d *player) fastForward(key types.NamespacedName, from, to time.Time, done func() (bool, error)) (bool, error) {
	for t := from; !t.After(to); t = t.Add(15 * time.Minute) {
		before := evaluations(key)
		d.clock.SetTime(t)
		patch := fmt.Sprintf(`{"metadata":{"annotations":{"demo.plumbline.dev/clock":%q}}}`, t.Format(time.RFC3339))
		line := &v1alpha1.ModelLine{ObjectMeta: metav1.ObjectMeta{Namespace: key.Namespace, Name: key.Name}}
		if err := d.c.Patch(d.ctx, line, client.RawPatch(types.MergePatchType, []byte(patch))); err != nil {
			return false, fmt.Errorf("wake the line: %w", err)
		}
		err := d.wait("the triggers to be judged at "+t.Format("Mon 15:04"), func() (bool, error) {
			return evaluations(key) > before, nil
		})
		if err != nil {
			return false, err
		}
		if done != nil {
			ok, err := done()
			if err != nil || ok {
				return ok, err
			}
		}
	}
	return false, d.printEvents()
}

// evaluations counts the line's trigger and guard evaluations, from the
// manager's metrics (the manager runs in this process).
func evaluations(key types.NamespacedName) float64 {
	families, err := ctrlmetrics.Registry.Gather()
	if err != nil {
		return 0
	}
	sum := 0.0
	for _, f := range families {
		if f.GetName() != "plumbline_trigger_evaluations_total" && f.GetName() != "plumbline_guard_evaluations_total" {
			continue
		}
		for _, m := range f.GetMetric() {
			ns, line := "", ""
			for _, l := range m.GetLabel() {
				switch l.GetName() {
				case "namespace":
					ns = l.GetValue()
				case "line":
					line = l.GetValue()
				}
			}
			if ns == key.Namespace && line == key.Name {
				sum += m.GetCounter().GetValue()
			}
		}
	}
	return sum
}

const scorer = "late-risk-scorer"

func (d *player) act(what string, err error) error {
	if err != nil {
		return err
	}
	d.say("(stand-in) " + what)
	return nil
}

func (d *player) annotate(key types.NamespacedName, token string) error {
	patch := fmt.Sprintf(`{"metadata":{"annotations":{%q:%q}}}`, v1alpha1.RetrainRequestAnnotation, token)
	line := &v1alpha1.ModelLine{ObjectMeta: metav1.ObjectMeta{Namespace: key.Namespace, Name: key.Name}}
	if err := d.c.Patch(d.ctx, line, client.RawPatch(types.MergePatchType, []byte(patch))); err != nil {
		return fmt.Errorf("annotate line: %w", err)
	}
	d.say(fmt.Sprintf("kubectl annotate modelline %s %s=%s", key.Name, v1alpha1.RetrainRequestAnnotation, token))
	return nil
}

// waitPhase prints events until a version reaches a phase.
func (d *player) waitPhase(name string, phase v1alpha1.VersionPhase) error {
	return d.wait(fmt.Sprintf("version %s to be %s", name, phase), func() (bool, error) {
		var v v1alpha1.ModelVersion
		if err := d.c.Get(d.ctx, types.NamespacedName{Namespace: namespace, Name: name}, &v); err != nil {
			return false, client.IgnoreNotFound(err)
		}
		if v.Status.Phase != phase {
			return false, nil
		}
		d.say(fmt.Sprintf("ModelVersion %s is now %s: %s", name, phase, v.Status.Message))
		return true, nil
	})
}

// setCron edits the line's schedule with a merge patch, as kubectl edit
// would, so it does not race the controller's status writes.
func (d *player) setCron(key types.NamespacedName, cron string) error {
	patch := fmt.Sprintf(`{"spec":{"schedule":{"cron":%q}}}`, cron)
	line := &v1alpha1.ModelLine{ObjectMeta: metav1.ObjectMeta{Namespace: key.Namespace, Name: key.Name}}
	if err := d.c.Patch(d.ctx, line, client.RawPatch(types.MergePatchType, []byte(patch))); err != nil {
		return fmt.Errorf("edit spec.schedule.cron: %w", err)
	}
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
	return d.wait(fmt.Sprintf("line %s to be Ready=%s (%s)", key.Name, status, reason), func() (bool, error) {
		var line v1alpha1.ModelLine
		if err := d.c.Get(d.ctx, key, &line); err != nil {
			return false, err
		}
		c := meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionReady)
		if c == nil || c.Status != status || c.Reason != reason {
			return false, nil
		}
		d.say(fmt.Sprintf("ModelLine %s is now Ready=%s (%s)", key.Name, c.Status, c.Reason))
		return true, nil
	})
}

// waitAdopted waits until n versions belong to the line.
func (d *player) waitAdopted(key types.NamespacedName, n int) error {
	return d.wait(fmt.Sprintf("%d versions to be adopted by %s", n, key.Name), func() (bool, error) {
		var vs v1alpha1.ModelVersionList
		if err := d.c.List(d.ctx, &vs, client.InNamespace(key.Namespace)); err != nil {
			return false, err
		}
		adopted := 0
		for _, v := range vs.Items {
			if ref := metav1.GetControllerOf(&v); ref != nil && ref.Name == key.Name && v.Status.Phase != "" {
				adopted++
			}
		}
		if adopted < n {
			return false, nil
		}
		d.say(fmt.Sprintf("%d versions belong to line %s (deleting the line deletes them)", adopted, key.Name))
		return true, nil
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
		case <-time.After(200 * time.Millisecond):
		}
	}
}

// printEvents prints the namespace's events not printed yet, oldest first.
func (d *player) printEvents() error {
	var list eventsv1.EventList
	if err := d.c.List(d.ctx, &list, client.InNamespace(namespace)); err != nil {
		return fmt.Errorf("list events: %w", err)
	}
	sort.Slice(list.Items, func(i, j int) bool {
		return list.Items[i].EventTime.Before(&list.Items[j].EventTime)
	})
	for _, e := range list.Items {
		if d.seen[e.UID] {
			continue
		}
		d.seen[e.UID] = true
		d.say(fmt.Sprintf("event %s %s %s/%s: %s", e.Type, e.Reason, e.Regarding.Kind, e.Regarding.Name, e.Note))
	}
	return nil
}

// summary prints the lines and versions as kubectl would, and the line's
// condition metrics as Prometheus would scrape them.
func (d *player) summary(metricsAddr string) error {
	if err := d.printEvents(); err != nil {
		return err
	}
	fmt.Fprintf(d.out, "\n== Summary\n\n")
	var lines v1alpha1.ModelLineList
	if err := d.c.List(d.ctx, &lines, client.InNamespace(namespace)); err != nil {
		return fmt.Errorf("list lines: %w", err)
	}
	tw := tabwriter.NewWriter(d.out, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "MODELLINE\tREADY\tLIVE\tPREVIOUS\tFALLBACK\tLAST RETRAIN OUTCOME")
	for _, l := range lines.Items {
		cond := func(typ string, reason bool) string {
			c := meta.FindStatusCondition(l.Status.Conditions, typ)
			switch {
			case c == nil:
				return "-"
			case reason:
				return c.Reason
			}
			return string(c.Status)
		}
		fallback := cond(v1alpha1.ConditionFallbackActive, false)
		if fallback == "True" {
			fallback += " (" + cond(v1alpha1.ConditionFallbackActive, true) + ")"
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\n", l.Name, cond(v1alpha1.ConditionReady, false), orDash(l.Status.LiveVersion),
			orDash(l.Status.PreviousVersion), fallback, cond(v1alpha1.ConditionRetraining, true))
	}
	fmt.Fprintln(tw)
	var versions v1alpha1.ModelVersionList
	if err := d.c.List(d.ctx, &versions, client.InNamespace(namespace)); err != nil {
		return fmt.Errorf("list versions: %w", err)
	}
	fmt.Fprintln(tw, "MODELVERSION\tSOURCE\tREASON\tPHASE\tGATE\tARTIFACT")
	for _, v := range versions.Items {
		verdict := "-"
		if v.Status.Gate != nil {
			verdict = string(v.Status.Gate.Verdict)
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\n", v.Name, v.Spec.Source, orDash(v.Spec.Reason), v.Status.Phase, verdict, v.Spec.ArtifactURI)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	var dep appsv1.Deployment
	if err := d.c.Get(d.ctx, types.NamespacedName{Namespace: namespace, Name: "late-risk-scorer"}, &dep); err == nil {
		fmt.Fprintf(d.out, "\nThe scorer Deployment serves %s (%s=%s).\n", modelURI(&dep), v1alpha1.VersionAnnotation, dep.Spec.Template.Annotations[v1alpha1.VersionAnnotation])
	}

	metrics, err := scrape(d.ctx, "http://"+metricsAddr+"/metrics", "plumbline_line_condition", "plumbline_live_version_info",
		"plumbline_gate_decisions_total", "plumbline_promotions_total", "plumbline_rollbacks_total", "plumbline_trigger_state", "plumbline_retrain_decisions_total")
	if err != nil {
		return err
	}
	fmt.Fprintf(d.out, "\nWhat Prometheus would scrape from the manager:\n%s\n", metrics)
	fmt.Fprintln(d.out, "\nThe gate reports above were computed by plumbline evaluate from synthetic golden-set")
	fmt.Fprintln(d.out, "predictions; training itself is played by the demo (no model is trained here).")
	return nil
}

func modelURI(dep *appsv1.Deployment) string {
	for _, c := range dep.Spec.Template.Spec.Containers {
		for _, e := range c.Env {
			if e.Name == "MODEL_URI" {
				return e.Value
			}
		}
	}
	return "no model"
}

// scrape fetches a metrics page and keeps the demo line's series of some
// metrics.
func scrape(ctx context.Context, url string, metrics ...string) (string, error) {
	req, err := http.NewRequestWithContext(ctx, http.MethodGet, url, nil)
	if err != nil {
		return "", err
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		return "", fmt.Errorf("scrape manager metrics: %w", err)
	}
	defer resp.Body.Close()
	body, err := io.ReadAll(resp.Body)
	if err != nil {
		return "", fmt.Errorf("read manager metrics: %w", err)
	}
	var keep []string
	for _, m := range metrics {
		found := false
		for _, l := range strings.Split(string(body), "\n") {
			if m == "plumbline_trigger_state" && strings.HasSuffix(l, " 0") {
				continue // one-hot: show the state each trigger is in
			}
			if strings.HasPrefix(l, m+"{") && strings.Contains(l, `namespace="`+namespace+`"`) {
				keep = append(keep, "    "+l)
				found = true
			}
		}
		if !found {
			return "", fmt.Errorf("the manager exports no %s series", m)
		}
	}
	sort.Strings(keep)
	return strings.Join(keep, "\n"), nil
}

// readDir reads every manifest in a directory except the kustomization.
func readDir(dir string) ([]*unstructured.Unstructured, error) {
	entries, err := os.ReadDir(dir)
	if err != nil {
		return nil, fmt.Errorf("read samples: %w", err)
	}
	var objs []*unstructured.Unstructured
	for _, e := range entries {
		if e.IsDir() || !strings.HasSuffix(e.Name(), ".yaml") || e.Name() == "kustomization.yaml" {
			continue
		}
		f, err := os.Open(filepath.Join(dir, e.Name()))
		if err != nil {
			return nil, err
		}
		dec := utilyaml.NewYAMLOrJSONDecoder(f, 4096)
		for {
			var m map[string]any
			if err := dec.Decode(&m); err != nil {
				if errors.Is(err, io.EOF) {
					break
				}
				f.Close()
				return nil, fmt.Errorf("%s: %w", e.Name(), err)
			}
			if len(m) > 0 {
				objs = append(objs, &unstructured.Unstructured{Object: m})
			}
		}
		f.Close()
	}
	return objs, nil
}

func setTrigger(o *unstructured.Unstructured, field string, v any) error {
	triggers, _, err := unstructured.NestedSlice(o.Object, "spec", "triggers")
	if err != nil || len(triggers) == 0 {
		return fmt.Errorf("sample line has no triggers")
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

func freeLoopbackAddr() (string, error) {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return "", fmt.Errorf("find a free port: %w", err)
	}
	defer l.Close()
	return l.Addr().String(), nil
}
