package integration

import (
	"context"
	"errors"
	"fmt"
	"math/rand/v2"
	"os"
	"sort"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	appsv1 "k8s.io/api/apps/v1"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"
	"k8s.io/apimachinery/pkg/runtime/schema"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// The fault-injection test. Lines go through the whole life (a candidate
// rejected at the gate, one trained, gated, approved by a person and
// promoted, then the guard's rollback to the previous version, or to the
// rule-based version where the line does not allow the previous) while the
// manager's writes fail at random (conflicts, server errors, timeouts before
// and after the write took effect) and the manager dies and is started
// again at random points: right after it patched the serving Deployment and
// before it wrote down why, after any other write, and between the steps.
// After every step and at the end it checks what must hold whatever
// happened, and that the end state is the one a run without faults reaches.
//
// PLUMBLINE_CHAOS_SEEDS sets how many seeds run (make test: 10, make chaos:
// 100); PLUMBLINE_CHAOS_FIRST_SEED where they start.

func init() {
	scenarios["chaos"] = guardScenario([2]time.Time{hm(6, 10), hm(12, 0)})
}

// Fault kinds.
const (
	faultConflict      = "conflict"
	faultServerError   = "server-error"
	faultTimeoutBefore = "timeout-before-write"
	faultTimeoutAfter  = "timeout-after-write"
	faultCrashAfterDep = "crash-after-deployment-patch"
	faultCrashAfter    = "crash-after-write"
)

var faultKinds = []string{faultConflict, faultServerError, faultTimeoutBefore, faultTimeoutAfter, faultCrashAfterDep, faultCrashAfter}

// faults decides, from a seeded generator, which of the manager's writes
// fail and how, and when the manager dies.
type faults struct {
	mu  sync.Mutex
	rng *rand.Rand
	// rate is the share of writes that fail (split evenly among the four
	// kinds of failure); crashAfterDeployment and crashAfterWrite are the
	// chances that the manager dies right after a successful write of the
	// serving Deployment, or of anything else.
	rate, crashAfterDeployment, crashAfterWrite float64
	counts                                      map[string]int
	// life is the running manager's; a crash ends it, and the restarter
	// starts a new manager with a new life.
	life    *life
	crashed chan struct{}
}

type life struct{ dead atomic.Bool }

var errStopped = errors.New("injected crash: the manager has stopped")

func newFaults(seed uint64, rate float64) *faults {
	f := &faults{rng: rand.New(rand.NewPCG(seed, 0x706c756d62)), rate: rate, counts: map[string]int{}, crashed: make(chan struct{}, 1)}
	if rate > 0 {
		f.crashAfterDeployment, f.crashAfterWrite = 0.35, 0.02
	}
	return f
}

func (f *faults) float() float64 {
	f.mu.Lock()
	defer f.mu.Unlock()
	return f.rng.Float64()
}

func (f *faults) count(kind string) {
	f.mu.Lock()
	defer f.mu.Unlock()
	f.counts[kind]++
}

// wrap is the manager's client with faults: each manager started gets a new
// life.
func (f *faults) wrap(c client.Client) client.Client {
	l := &life{}
	f.mu.Lock()
	f.life = l
	f.mu.Unlock()
	return &faultyClient{Client: c, f: f, life: l}
}

// do runs one write of the manager, or fails it.
func (f *faults) do(l *life, obj client.Object, write func() error) error {
	if l.dead.Load() {
		return errStopped
	}
	kind := ""
	if r := f.float(); r < f.rate {
		kind = []string{faultConflict, faultServerError, faultTimeoutBefore, faultTimeoutAfter}[int(r/f.rate*4)%4]
	}
	gr := schema.GroupResource{Resource: strings.ToLower(fmt.Sprintf("%T", obj))}
	switch kind {
	case faultConflict:
		f.count(kind)
		return apierrors.NewConflict(gr, obj.GetName(), errors.New("injected: the object has been modified"))
	case faultServerError:
		f.count(kind)
		return apierrors.NewInternalError(errors.New("injected: etcdserver: leader changed"))
	case faultTimeoutBefore:
		f.count(kind)
		return apierrors.NewTimeoutError("injected: the request was not handled in time", 1)
	}
	if err := write(); err != nil {
		return err
	}
	if kind == faultTimeoutAfter {
		// The write took effect; the client gave up waiting for the answer.
		f.count(kind)
		return fmt.Errorf("injected: %w", context.DeadlineExceeded)
	}
	_, isDeployment := obj.(*appsv1.Deployment)
	if isDeployment && f.float() < f.crashAfterDeployment {
		f.crash(l, faultCrashAfterDep)
	} else if !isDeployment && f.float() < f.crashAfterWrite {
		f.crash(l, faultCrashAfter)
	}
	return nil
}

// crash ends the manager's life: nothing it writes from now on arrives, and
// the restarter replaces it.
func (f *faults) crash(l *life, kind string) {
	if l.dead.Swap(true) {
		return
	}
	f.count(kind)
	select {
	case f.crashed <- struct{}{}:
	default:
	}
}

type faultyClient struct {
	client.Client
	f    *faults
	life *life
}

func (c *faultyClient) Create(ctx context.Context, obj client.Object, opts ...client.CreateOption) error {
	return c.f.do(c.life, obj, func() error { return c.Client.Create(ctx, obj, opts...) })
}

func (c *faultyClient) Update(ctx context.Context, obj client.Object, opts ...client.UpdateOption) error {
	return c.f.do(c.life, obj, func() error { return c.Client.Update(ctx, obj, opts...) })
}

func (c *faultyClient) Patch(ctx context.Context, obj client.Object, patch client.Patch, opts ...client.PatchOption) error {
	return c.f.do(c.life, obj, func() error { return c.Client.Patch(ctx, obj, patch, opts...) })
}

func (c *faultyClient) Delete(ctx context.Context, obj client.Object, opts ...client.DeleteOption) error {
	return c.f.do(c.life, obj, func() error { return c.Client.Delete(ctx, obj, opts...) })
}

func (c *faultyClient) Status() client.SubResourceWriter {
	return &faultyStatus{SubResourceWriter: c.Client.Status(), c: c}
}

type faultyStatus struct {
	client.SubResourceWriter
	c *faultyClient
}

func (s *faultyStatus) Update(ctx context.Context, obj client.Object, opts ...client.SubResourceUpdateOption) error {
	return s.c.f.do(s.c.life, obj, func() error { return s.SubResourceWriter.Update(ctx, obj, opts...) })
}

func (s *faultyStatus) Patch(ctx context.Context, obj client.Object, patch client.Patch, opts ...client.SubResourcePatchOption) error {
	return s.c.f.do(s.c.life, obj, func() error { return s.SubResourceWriter.Patch(ctx, obj, patch, opts...) })
}

// chaosRun is one seed's run: its faults, its restarts, the checks made.
type chaosRun struct {
	t          *testing.T
	seed       uint64
	f          *faults
	rng        *rand.Rand
	mu         sync.Mutex // one restart at a time
	restarts   int
	checks     int
	violations int
	stop       chan struct{}
	done       chan struct{}
}

// restart replaces the running manager, as a crash and a new Pod would.
func (r *chaosRun) restart() {
	r.mu.Lock()
	defer r.mu.Unlock()
	if err := stopManager(); err != nil && !errors.Is(err, context.Canceled) {
		r.t.Logf("stop manager: %v", err)
	}
	if err := startManager(); err != nil {
		r.t.Errorf("start manager: %v", err)
		return
	}
	r.restarts++
}

// restarter starts a new manager whenever the running one crashed.
func (r *chaosRun) restarter() {
	defer close(r.done)
	for {
		select {
		case <-r.stop:
			return
		case <-r.f.crashed:
			r.restart()
		}
	}
}

// maybeRestart restarts the manager between steps, now and then.
func (r *chaosRun) maybeRestart() {
	if r.f.rate > 0 && r.rng.Float64() < 0.25 {
		r.restart()
	}
}

func (r *chaosRun) violation(format string, args ...any) {
	r.t.Helper()
	r.violations++
	r.t.Errorf("seed %d: "+format, append([]any{r.seed}, args...)...)
}

// chaosLine is one line of a run.
type chaosLine struct {
	key client.ObjectKey
	// previous says the line may roll back to the version before (else
	// only to the rule-based one).
	previous bool
}

func (l chaosLine) fallback() string {
	if l.previous {
		return initial
	}
	return rulesName
}

// check verifies what must hold after every step, whatever failed.
func (r *chaosRun) check(l chaosLine, final bool) {
	r.t.Helper()
	ctx := context.Background()
	ns := l.key.Namespace
	// The Deployment is read before the versions: a promotion is recorded
	// before its patch, so every patch seen here has its record in the
	// list read after.
	dep := deployment(r.t, ns)
	var versions v1alpha1.ModelVersionList
	if err := k8s.List(ctx, &versions, client.InNamespace(ns)); err != nil {
		r.t.Fatal(err)
	}
	byName := map[string]*v1alpha1.ModelVersion{}
	for i := range versions.Items {
		byName[versions.Items[i].Name] = &versions.Items[i]
	}
	// At most one Job per version and role.
	r.checks++
	perRole := map[string]int{}
	for _, j := range lineJobs(r.t, ns) {
		perRole[j.Labels[v1alpha1.VersionLabel]+"/"+j.Labels[v1alpha1.RoleLabel]]++
	}
	for k, n := range perRole {
		if n > 1 {
			r.violation("%s: %d Jobs for %s", ns, n, k)
		}
	}
	var maxSeq int64
	for _, v := range byName {
		// No trained version Live without a passing gate; the line being
		// Manual, nothing Live that a person did not approve, except what
		// the line allows: the guard's rollback and its switch to the
		// rules (never an alternative).
		r.checks++
		if v.Status.Phase == v1alpha1.PhaseLive {
			if v.Spec.Source == v1alpha1.SourceTrained && (v.Status.Gate == nil || v.Status.Gate.Verdict != v1alpha1.GatePassed) {
				r.violation("%s: %s is Live without a passing gate (%+v)", ns, v.Name, v.Status.Gate)
			}
			kind := v1alpha1.PromotionCandidate
			if v.Status.Promotion != nil && v.Status.Promotion.Kind != "" {
				kind = v.Status.Promotion.Kind
			}
			switch kind {
			case v1alpha1.PromotionCandidate:
				if c := meta.FindStatusCondition(v.Status.Conditions, v1alpha1.ConditionApproved); c == nil || c.Status != metav1.ConditionTrue || v.Spec.Decision != v1alpha1.DecisionApproved {
					r.violation("%s: %s is Live without a person's approval (decision %q, condition %+v)", ns, v.Name, v.Spec.Decision, c)
				}
			case v1alpha1.PromotionAlternative:
				r.violation("%s: %s is Live as an alternative, a switch a Manual line leaves to a person", ns, v.Name)
			}
		}
		// No switch restores the version it replaces: what it records to
		// restore is the replaced version's own artifact.
		if p := v.Status.Promotion; p != nil {
			maxSeq = max(maxSeq, p.Sequence)
			r.checks++
			if p.FromVersion == v.Name {
				r.violation("%s: %s records itself as the version it replaces", ns, v.Name)
			}
			if from := byName[p.FromVersion]; from != nil && p.FromArtifactURI != from.Spec.ArtifactURI {
				r.violation("%s: %s replaces %s but would restore %q, not its artifact %q", ns, v.Name, p.FromVersion, p.FromArtifactURI, from.Spec.ArtifactURI)
			}
		}
	}
	// The serving Deployment's template changed once per promotion or
	// rollback started: one patch each, none twice, none to undo. (One
	// recorded since the Deployment was read may not be patched yet.)
	r.checks++
	changes := dep.Generation - 1
	if changes > maxSeq || changes < maxSeq-1 || final && changes != maxSeq {
		var records []string
		for _, v := range byName {
			records = append(records, fmt.Sprintf("%s %s/%s promotion %+v", v.Name, v.Status.Phase, v.Status.Reason, v.Status.Promotion))
		}
		sort.Strings(records)
		r.violation("%s: the Deployment's template changed %d times for %d promotions and rollbacks; it serves %v with %v; versions:\n%s", ns, changes, maxSeq,
			dep.Spec.Template.Annotations, dep.Spec.Template.Spec.Containers[0].Env, strings.Join(records, "\n"))
	}
}

// snapshot is a line's end state, in terms two runs can share.
func snapshot(t *testing.T, l chaosLine) string {
	t.Helper()
	ctx := context.Background()
	ns := l.key.Namespace
	var versions v1alpha1.ModelVersionList
	if err := k8s.List(ctx, &versions, client.InNamespace(ns)); err != nil {
		t.Fatal(err)
	}
	var parts []string
	for _, v := range versions.Items {
		s := fmt.Sprintf("%s=%s/%s", v.Name, v.Status.Phase, v.Status.Reason)
		if p := v.Status.Promotion; p != nil {
			s += fmt.Sprintf(" promoted#%d as %s from %q", p.Sequence, p.Kind, p.FromVersion)
		}
		if g := v.Status.Gate; g != nil {
			s += fmt.Sprintf(" gate %s/%s", g.Verdict, g.Reason)
		}
		parts = append(parts, s)
	}
	jobs := map[string]int{}
	for _, j := range lineJobs(t, ns) {
		jobs[j.Labels[v1alpha1.VersionLabel]+"/"+j.Labels[v1alpha1.RoleLabel]]++
	}
	for k, n := range jobs {
		parts = append(parts, fmt.Sprintf("job %s x%d", k, n))
	}
	line := getLine(t, l.key)
	_, servedVersion := served(t, ns)
	parts = append(parts, fmt.Sprintf("line live=%s previous=%s serves=%s template-changes=%d", line.Status.LiveVersion, line.Status.PreviousVersion,
		servedVersion, deployment(t, ns).Generation-1))
	for _, typ := range []string{v1alpha1.ConditionReady, v1alpha1.ConditionFallbackActive, v1alpha1.ConditionRetraining, v1alpha1.ConditionAwaitingApproval} {
		if c := meta.FindStatusCondition(line.Status.Conditions, typ); c != nil {
			parts = append(parts, fmt.Sprintf("condition %s=%s/%s", typ, c.Status, c.Reason))
		}
	}
	sort.Strings(parts)
	return strings.Join(parts, "\n")
}

// play takes the run's lines through the whole life, checking after every
// step, and returns their end states.
func (r *chaosRun) play(lines []chaosLine) []string {
	t := r.t
	each := func(step func(l chaosLine)) {
		for _, l := range lines {
			step(l)
		}
		for _, l := range lines {
			r.check(l, false)
		}
		r.maybeRestart()
	}
	failing := passingReport()
	setCandidate(&failing.Metrics[0], 0.79) // below the criterion's minimum 0.80
	// A candidate the gate rejects.
	clk.SetTime(hm(5, 0))
	each(func(l chaosLine) { requestRetrain(t, l.key, "first") })
	each(func(l chaosLine) {
		waitPhase(t, l.key.Namespace, "late-risk-v1", v1alpha1.PhaseTraining)
		succeedJob(t, l.key.Namespace, "late-risk-v1-train", "")
	})
	each(func(l chaosLine) {
		waitPhase(t, l.key.Namespace, "late-risk-v1", v1alpha1.PhaseEvaluating)
		succeedJob(t, l.key.Namespace, "late-risk-v1-gate", encode(t, failing))
	})
	each(func(l chaosLine) { waitPhase(t, l.key.Namespace, "late-risk-v1", v1alpha1.PhaseRejected) })
	// One that passes, waits for a person, and goes live at 06:00.
	clk.SetTime(hm(5, 20))
	each(func(l chaosLine) { requestRetrain(t, l.key, "second") })
	each(func(l chaosLine) {
		waitPhase(t, l.key.Namespace, "late-risk-v2", v1alpha1.PhaseTraining)
		succeedJob(t, l.key.Namespace, "late-risk-v2-train", "")
	})
	each(func(l chaosLine) {
		waitPhase(t, l.key.Namespace, "late-risk-v2", v1alpha1.PhaseEvaluating)
		succeedJob(t, l.key.Namespace, "late-risk-v2-gate", encode(t, passingReport()))
	})
	each(func(l chaosLine) {
		waitPhase(t, l.key.Namespace, "late-risk-v2", v1alpha1.PhaseAwaitingApproval)
		decide(t, l.key.Namespace, "late-risk-v2", v1alpha1.DecisionApproved, "reviewed the gate report")
	})
	each(func(l chaosLine) { waitPhase(t, l.key.Namespace, "late-risk-v2", v1alpha1.PhasePromoting) })
	clk.SetTime(hm(6, 0))
	each(func(l chaosLine) { rollOutTo(t, l.key.Namespace, "late-risk-v2") })
	each(func(l chaosLine) { waitPhase(t, l.key.Namespace, "late-risk-v2", v1alpha1.PhaseLive) })
	// Production quality drops at 06:10: the guard watches, sees it, and
	// switches to the fallback, which serves again. (The waits are on
	// states, not on counts of evaluations: a restarted manager judges
	// every line at once, whenever the test looks.)
	for _, g := range []struct {
		at    time.Time
		state v1alpha1.TriggerState
	}{{hm(6, 5), v1alpha1.TriggerInactive}, {hm(6, 15), v1alpha1.TriggerPending}, {hm(6, 20), v1alpha1.TriggerFiring}} {
		clk.SetTime(g.at)
		each(func(l chaosLine) {
			nudge(t, l.key, g.at)
			eventually(t, waitFor, func() error {
				st := getLine(t, l.key).Status.Guard
				if st == nil || st.Name != "late-risk-v2" || st.State != g.state {
					return fmt.Errorf("guard %+v at %s, want %s on late-risk-v2", st, g.at.Format("15:04"), g.state)
				}
				return nil
			})
		})
	}
	each(func(l chaosLine) { waitPhase(t, l.key.Namespace, l.fallback(), v1alpha1.PhasePromoting) })
	each(func(l chaosLine) { rollOutTo(t, l.key.Namespace, l.fallback()) })
	each(func(l chaosLine) {
		waitPhase(t, l.key.Namespace, l.fallback(), v1alpha1.PhaseLive)
		waitPhase(t, l.key.Namespace, "late-risk-v2", v1alpha1.PhaseArchived)
	})
	// Let the last writes land, then judge the end.
	var out []string
	for _, l := range lines {
		var snap string
		eventually(t, waitFor, func() error {
			line := getLine(t, l.key)
			if line.Status.LiveVersion != l.fallback() {
				return fmt.Errorf("live %q, want %s", line.Status.LiveVersion, l.fallback())
			}
			if c := meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionFallbackActive); c == nil || c.Status != metav1.ConditionTrue {
				return fmt.Errorf("FallbackActive %+v", c)
			}
			snap = snapshot(t, l)
			return nil
		})
		r.check(l, true)
		out = append(out, snap)
	}
	return out
}

// chaosLines sets up a run's two lines, Manual, guarded, one allowed to
// roll back to the previous version and one only to the rules.
func chaosLines(t *testing.T, prefix string) []chaosLine {
	t.Helper()
	clk.SetTime(hm(0, 30))
	var lines []chaosLine
	for _, previous := range []bool{true, false} {
		ns := prefix + "-previous"
		if !previous {
			ns = prefix + "-rules"
		}
		key := liveLine(t, ns, func(o *unstructured.Unstructured) {
			mustSet(t, o, "spec.gate.approval", "Manual")
			mustSet(t, o, "spec.gate.withoutApproval", map[string]any{"ruleBasedFallback": true})
			mustSet(t, o, "spec.fallback.previous", previous)
			mustSet(t, o, "spec.guard", map[string]any{
				"query": `larkspur_live_auc{scenario="chaos"}`, "below": 0.76,
				"forSeconds": int64(600), "everySeconds": int64(60), "probationSeconds": int64(7200),
			})
		})
		lines = append(lines, chaosLine{key: key, previous: previous})
	}
	return lines
}

func envInt(name string, def int) int {
	if n, err := strconv.Atoi(os.Getenv(name)); err == nil && n > 0 {
		return n
	}
	return def
}

func TestChaos(t *testing.T) {
	if prometheusURL == "" {
		t.Skip("prometheus is not installed")
	}
	seeds := envInt("PLUMBLINE_CHAOS_SEEDS", 10)
	first := envInt("PLUMBLINE_CHAOS_FIRST_SEED", 1)
	defer func() {
		managerWrap = nil
		if err := stopManager(); err != nil {
			t.Logf("stop manager: %v", err)
		}
		if err := startManager(); err != nil {
			t.Fatalf("start the suite's manager again: %v", err)
		}
	}()

	// start begins a seed's run: its faults wrap every manager started
	// until the run's test ends.
	start := func(t *testing.T, seed uint64, rate float64) *chaosRun {
		f := newFaults(seed, rate)
		r := &chaosRun{t: t, seed: seed, f: f, rng: rand.New(rand.NewPCG(seed, 7)), stop: make(chan struct{}), done: make(chan struct{})}
		managerWrap = f.wrap
		r.restart()
		go r.restarter()
		t.Cleanup(func() {
			close(r.stop)
			<-r.done
		})
		return r
	}
	play := func(r *chaosRun, prefix string) []string {
		lines := chaosLines(r.t, prefix)
		for _, l := range lines {
			r.check(l, false)
		}
		return r.play(lines)
	}

	var want []string
	if !t.Run("no faults", func(t *testing.T) {
		want = play(start(t, 0, 0), "chaos-reference")
		t.Logf("end state without faults:\n%s", strings.Join(want, "\n\n"))
	}) {
		t.Fatal("the run without faults failed: the faulty runs have nothing to compare with")
	}
	totals := map[string]int{}
	var restarts, checks, violations, failedSeeds int
	for seed := uint64(first); seed < uint64(first+seeds); seed++ {
		var r *chaosRun
		ok := t.Run(fmt.Sprintf("seed %d", seed), func(t *testing.T) {
			r = start(t, seed, 0.15)
			got := play(r, fmt.Sprintf("chaos-%d", seed))
			for i := range want {
				r.checks++
				if got[i] != want[i] {
					r.violation("end state differs from the run without faults:\n--- without faults\n%s\n--- seed %d\n%s", want[i], seed, got[i])
				}
			}
		})
		if r == nil {
			continue
		}
		var kinds []string
		for _, k := range faultKinds {
			totals[k] += r.f.counts[k]
			kinds = append(kinds, fmt.Sprintf("%s %d", k, r.f.counts[k]))
		}
		restarts += r.restarts
		checks += r.checks
		violations += r.violations
		if !ok {
			failedSeeds++
		}
		t.Logf("seed %d: %s; restarts %d; checks %d; violations %d", seed, strings.Join(kinds, ", "), r.restarts, r.checks, r.violations)
	}
	injected := 0
	var kinds []string
	for _, k := range faultKinds {
		injected += totals[k]
		kinds = append(kinds, fmt.Sprintf("%s %d", k, totals[k]))
	}
	fmt.Printf("chaos: %d seeds from %d: %d faults injected (%s); %d manager restarts; %d checks made; %d violations found; %d seeds failed\n",
		seeds, first, injected, strings.Join(kinds, ", "), restarts, checks, violations, failedSeeds)
	if injected == 0 || restarts <= seeds {
		t.Errorf("the runs injected %d faults and restarted the manager %d times: the test did not test", injected, restarts)
	}
}
