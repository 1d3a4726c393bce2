package integration

import (
	"context"
	"encoding/json"
	"fmt"
	"os/exec"
	"strings"
	"testing"

	appsv1 "k8s.io/api/apps/v1"
	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"
	"k8s.io/utils/ptr"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/metrics"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/contract/gatereport"
)

const (
	scorer      = "late-risk-scorer"
	initial     = "late-risk-v0"
	initialURI  = "s3://larkspur-models/late-risk/imported-2026-10"
	rulesName   = "late-risk-rules"
	lineName    = "late-risk"
	trainPrefix = "s3://larkspur-models/late-risk/"
)

// larkspurDeployment is the scorer with a sidecar and a second variable, so
// a test can see that a promotion changes nothing else.
func larkspurDeployment(ns string) *appsv1.Deployment {
	dep := servingDeployment(ns, scorer, "scorer", "log-shipper")
	dep.Spec.Replicas = ptr.To[int32](2)
	dep.Spec.Template.Spec.Containers[0].Env = []corev1.EnvVar{
		{Name: "MODEL_URI", Value: initialURI},
		{Name: "SCORE_THRESHOLD", Value: "0.35"},
	}
	dep.Spec.Template.Spec.Containers[1].Env = []corev1.EnvVar{{Name: "MODEL_URI", Value: "not-the-scorer"}}
	return dep
}

// liveLine sets up the Larkspur line in its own namespace with its imported
// first version live: the Deployment, the rule-based fallback, the line
// (mutated as asked) and the Imported version, whose rollout the test plays
// out. It returns the line's key. The line starts without schedule, triggers
// and checks, which the trigger tests give it with their own queries: the
// lifecycle tests start retrains by hand.
func liveLine(t *testing.T, ns string, mutate func(*unstructured.Unstructured)) client.ObjectKey {
	t.Helper()
	ctx := context.Background()
	createNamespace(t, ns)
	if err := k8s.Create(ctx, larkspurDeployment(ns)); err != nil {
		t.Fatal(err)
	}
	// The Deployment controller has rolled the first template out.
	rollOut(t, ns, scorer)
	rules := sample(t, rulesSample)
	rules.SetNamespace(ns)
	if err := k8s.Create(ctx, rules); err != nil {
		t.Fatal(err)
	}
	line := sample(t, lineSample)
	line.SetNamespace(ns)
	for _, f := range []string{"spec.schedule", "spec.triggers", "spec.checks"} {
		mustSet(t, line, f, nil)
	}
	if mutate != nil {
		mutate(line)
	}
	if err := k8s.Create(ctx, line); err != nil {
		t.Fatal(err)
	}
	v0 := sample(t, importedSample)
	v0.SetNamespace(ns)
	if err := k8s.Create(ctx, v0); err != nil {
		t.Fatal(err)
	}
	if approval, _, _ := unstructured.NestedString(line.Object, "spec", "gate", "approval"); approval == "Manual" {
		// Under Manual even the first version waits for a person.
		waitPhase(t, ns, initial, v1alpha1.PhaseAwaitingApproval)
		decide(t, ns, initial, v1alpha1.DecisionApproved, "the line's first model, reviewed")
	}
	waitPhase(t, ns, initial, v1alpha1.PhasePromoting)
	rollOutTo(t, ns, initial)
	waitPhase(t, ns, initial, v1alpha1.PhaseLive)
	return client.ObjectKey{Namespace: ns, Name: lineName}
}

func getVersion(t *testing.T, ns, name string) *v1alpha1.ModelVersion {
	t.Helper()
	var v v1alpha1.ModelVersion
	if err := k8s.Get(context.Background(), client.ObjectKey{Namespace: ns, Name: name}, &v); err != nil {
		t.Fatal(err)
	}
	return &v
}

// waitPhase waits for a version to reach a phase and returns it.
func waitPhase(t *testing.T, ns, name string, phase v1alpha1.VersionPhase) *v1alpha1.ModelVersion {
	t.Helper()
	var v v1alpha1.ModelVersion
	eventually(t, waitFor, func() error {
		if err := k8s.Get(context.Background(), client.ObjectKey{Namespace: ns, Name: name}, &v); err != nil {
			return err
		}
		if v.Status.Phase != phase {
			return fmt.Errorf("version %s is %s (%s: %s), want %s", name, v.Status.Phase, v.Status.Reason, v.Status.Message, phase)
		}
		return nil
	})
	return &v
}

func getLine(t *testing.T, key client.ObjectKey) *v1alpha1.ModelLine {
	t.Helper()
	var line v1alpha1.ModelLine
	if err := k8s.Get(context.Background(), key, &line); err != nil {
		t.Fatal(err)
	}
	return &line
}

// requestRetrain sets the retrain-request annotation, as a person would with
// kubectl annotate --overwrite.
func requestRetrain(t *testing.T, key client.ObjectKey, token string) {
	t.Helper()
	patch := fmt.Sprintf(`{"metadata":{"annotations":{%q:%q}}}`, v1alpha1.RetrainRequestAnnotation, token)
	line := &v1alpha1.ModelLine{}
	line.Namespace, line.Name = key.Namespace, key.Name
	if err := k8s.Patch(context.Background(), line, client.RawPatch("application/merge-patch+json", []byte(patch))); err != nil {
		t.Fatal(err)
	}
}

// decide sets a person's decision on a version.
func decide(t *testing.T, ns, name string, d v1alpha1.Decision, note string) {
	t.Helper()
	patch := fmt.Sprintf(`{"spec":{"decision":%q,"decisionNote":%q}}`, d, note)
	v := &v1alpha1.ModelVersion{}
	v.Namespace, v.Name = ns, name
	if err := k8s.Patch(context.Background(), v, client.RawPatch("application/merge-patch+json", []byte(patch))); err != nil {
		t.Fatal(err)
	}
}

func f(v float64) *float64 { return &v }

// passingReport is what an evaluator reports for a candidate that meets the
// sample line's criteria: ROC AUC at least 0.80 and no more than 0.005 worse
// than live, log loss at most 0.45, recall no more than 0.02 worse in every
// depot.
func passingReport() *gatereport.Report {
	m := func(name, seg string, cand, base, lo, hi float64) gatereport.Metric {
		return gatereport.Metric{Metric: name, Segment: seg, Candidate: f(cand), Baseline: f(base), Delta: f(cand - base),
			DeltaLow: f(lo), DeltaHigh: f(hi), Confidence: f(0.95), Test: "bootstrap", N: 2500}
	}
	return &gatereport.Report{
		Schema: gatereport.Schema, Rows: 5000,
		Metrics: []gatereport.Metric{
			m("roc_auc", "", 0.842, 0.836, -0.002, 0.014),
			m("log_loss", "", 0.401, 0.412, -0.02, -0.002),
			m("recall", "", 0.74, 0.73, -0.005, 0.025),
			m("recall", "north-depot", 0.75, 0.74, -0.012, 0.03),
			m("recall", "harbour-depot", 0.72, 0.72, -0.018, 0.018),
		},
		MustPass: gatereport.MustPass{Total: 40},
	}
}

// setCandidate changes a metric's candidate value and keeps the report
// consistent: the delta and its interval move with it.
func setCandidate(m *gatereport.Metric, v float64) {
	shift := v - *m.Candidate
	m.Candidate = f(v)
	for _, p := range []**float64{&m.Delta, &m.DeltaLow, &m.DeltaHigh} {
		if *p != nil {
			*p = f(**p + shift)
		}
	}
}

func encode(t *testing.T, r *gatereport.Report) string {
	t.Helper()
	b, err := json.Marshal(r)
	if err != nil {
		t.Fatal(err)
	}
	return string(b)
}

func envOf(c corev1.Container) map[string]string {
	out := map[string]string{}
	for _, e := range c.Env {
		out[e.Name] = e.Value
	}
	return out
}

func deployment(t *testing.T, ns string) *appsv1.Deployment {
	t.Helper()
	var dep appsv1.Deployment
	if err := k8s.Get(context.Background(), client.ObjectKey{Namespace: ns, Name: scorer}, &dep); err != nil {
		t.Fatal(err)
	}
	return &dep
}

// served reads what the scorer Deployment serves.
func served(t *testing.T, ns string) (artifact, version string) {
	dep := deployment(t, ns)
	return envOf(dep.Spec.Template.Spec.Containers[0])["MODEL_URI"], dep.Spec.Template.Annotations[v1alpha1.VersionAnnotation]
}

func lineJobs(t *testing.T, ns string) []batchv1.Job {
	t.Helper()
	var jobs batchv1.JobList
	if err := k8s.List(context.Background(), &jobs, client.InNamespace(ns)); err != nil {
		t.Fatal(err)
	}
	return jobs.Items
}

// metricValue reads a plumbline metric from the manager's registry.
func metricValue(t *testing.T, name string, labels map[string]string) float64 {
	t.Helper()
	families, err := metrics.Registry.Gather()
	if err != nil {
		t.Fatal(err)
	}
	for _, fam := range families {
		if fam.GetName() != name {
			continue
		}
	next:
		for _, m := range fam.GetMetric() {
			have := map[string]string{}
			for _, l := range m.GetLabel() {
				have[l.GetName()] = l.GetValue()
			}
			for k, v := range labels {
				if have[k] != v {
					continue next
				}
			}
			if m.GetCounter() != nil {
				return m.GetCounter().GetValue()
			}
			return m.GetGauge().GetValue()
		}
	}
	return 0
}

// A candidate goes the whole way: a person's request starts it, it trains,
// passes the gate, rolls out and goes live, and the version it replaced is
// archived.
func TestLifecycleHappyPath(t *testing.T) {
	ctx := context.Background()
	ns := "happy"
	key := liveLine(t, ns, nil)

	// The line's status follows its versions' (written just before it).
	line := waitLineCondition(t, key, v1alpha1.ConditionRetraining, metav1.ConditionFalse, "Promoted")
	if line.Status.LiveVersion != initial || line.Status.PreviousVersion != "" {
		t.Errorf("after the first import: live %q previous %q", line.Status.LiveVersion, line.Status.PreviousVersion)
	}
	if _, v := served(t, ns); v != initial {
		t.Errorf("Deployment annotation %s = %q, want %s", v1alpha1.VersionAnnotation, v, initial)
	}
	waitPhase(t, ns, rulesName, v1alpha1.PhaseStandby)
	start := clk.Now()

	// A person asks for a retrain.
	requestRetrain(t, key, "2026-11-02T09:30")
	v1 := waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseTraining)
	if v1.Spec.Source != v1alpha1.SourceTrained || v1.Spec.Cause != v1alpha1.ReasonManual || v1.Spec.ArtifactURI != trainPrefix+"1" {
		t.Errorf("v1 spec %+v", v1.Spec)
	}
	if ref := metav1.GetControllerOf(v1); ref == nil || ref.Name != lineName {
		t.Errorf("v1 not owned by the line: %v", ref)
	}
	if v1.Status.DataTo == nil || !v1.Status.DataTo.Time.Equal(start.Truncate(1e9)) || v1.Status.DataFrom != nil {
		t.Errorf("data window %v to %v; want all history to the clock's %s", v1.Status.DataFrom, v1.Status.DataTo, start)
	}
	line = waitLineCondition(t, key, v1alpha1.ConditionRetraining, metav1.ConditionTrue, "Training")
	if line.Status.LastRetrainRequest != "2026-11-02T09:30" || line.Status.ActiveVersion != "late-risk-v1" || line.Status.VersionCount != 1 {
		t.Errorf("line status after the request: %+v", line.Status)
	}

	// The training Job: deterministic name, owned by the version, labelled,
	// every container told what to train.
	train := waitJob(t, ns, "late-risk-v1-train")
	if !metav1.IsControlledBy(train, v1) {
		t.Errorf("training Job owner %v, want version %s", train.OwnerReferences, v1.UID)
	}
	for k, want := range map[string]string{v1alpha1.LineLabel: lineName, v1alpha1.VersionLabel: "late-risk-v1", v1alpha1.RoleLabel: "train"} {
		if train.Labels[k] != want || train.Spec.Template.Labels[k] != want {
			t.Errorf("label %s: Job %q, Pod template %q; want %q", k, train.Labels[k], train.Spec.Template.Labels[k], want)
		}
	}
	env := envOf(train.Spec.Template.Spec.Containers[0])
	for k, want := range map[string]string{
		"PLUMBLINE_LINE": lineName, "PLUMBLINE_VERSION": "late-risk-v1", "PLUMBLINE_ARTIFACT_URI": trainPrefix + "1",
		"PLUMBLINE_REASON": "Manual", "PLUMBLINE_DATA_FROM": "", "PLUMBLINE_DATA_TO": start.UTC().Format("2006-01-02T15:04:05Z"),
	} {
		if got, ok := env[k]; !ok || got != want {
			t.Errorf("training env %s = %q (set %v), want %q", k, got, ok, want)
		}
	}
	if train.Spec.Template.Spec.RestartPolicy != corev1.RestartPolicyNever || ptr.Deref(train.Spec.BackoffLimit, 0) != 2 {
		t.Errorf("template settings lost: restart %s, backoffLimit %v", train.Spec.Template.Spec.RestartPolicy, train.Spec.BackoffLimit)
	}

	// Training succeeds; the evaluation Job compares v1 with the live v0.
	succeedJob(t, ns, train.Name, "")
	v1 = waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseEvaluating)
	if !conditionIs(v1.Status.Conditions, v1alpha1.ConditionTrained) {
		t.Errorf("Trained condition not True: %+v", v1.Status.Conditions)
	}
	gateJob := waitJob(t, ns, "late-risk-v1-gate")
	genv := envOf(gateJob.Spec.Template.Spec.Containers[0])
	if genv["PLUMBLINE_CANDIDATE_URI"] != trainPrefix+"1" || genv["PLUMBLINE_BASELINE_URI"] != initialURI || genv["PLUMBLINE_VERSION"] != "late-risk-v1" {
		t.Errorf("gate env %v", genv)
	}
	before := deployment(t, ns)

	// The report passes every criterion; the line's approval is Automatic.
	succeedJob(t, ns, gateJob.Name, encode(t, passingReport()))
	v1 = waitPhase(t, ns, "late-risk-v1", v1alpha1.PhasePromoting)
	g := v1.Status.Gate
	if g == nil || g.Verdict != v1alpha1.GatePassed || g.BaselineVersion != initial || len(g.Criteria) != 5 || g.Rows != 5000 {
		t.Fatalf("gate result %+v", g)
	}
	for _, c := range g.Criteria {
		if !c.Passed || c.Candidate == "" || c.Message == "" {
			t.Errorf("criterion result %+v", c)
		}
	}

	// The promotion patches only the artifact variable and the annotation.
	deploymentGeneration(t, ns, scorer, before.Generation+1)
	after := deployment(t, ns)
	if a, v := served(t, ns); a != trainPrefix+"1" || v != "late-risk-v1" {
		t.Errorf("Deployment serves %s / %s", a, v)
	}
	want := before.Spec.Template.DeepCopy()
	want.Annotations[v1alpha1.VersionAnnotation] = "late-risk-v1"
	want.Spec.Containers[0].Env[0].Value = trainPrefix + "1"
	if !equalJSON(t, want, &after.Spec.Template) {
		t.Errorf("the promotion changed more than MODEL_URI and the annotation:\nwant %s\ngot  %s", toJSON(t, want), toJSON(t, &after.Spec.Template))
	}
	if after.Generation != before.Generation+1 {
		t.Errorf("generation %d, want one patch (%d)", after.Generation, before.Generation+1)
	}

	// The rollout completes: v1 is live, v0 archived.
	rollOut(t, ns, scorer)
	v1 = waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseLive)
	if v1.Status.PromotedTime == nil || v1.Status.Promotion == nil || v1.Status.Promotion.FromVersion != initial || v1.Status.Promotion.FromArtifactURI != initialURI {
		t.Errorf("promotion record %+v at %v", v1.Status.Promotion, v1.Status.PromotedTime)
	}
	// The manager's cache holds the gate result without its per-criterion
	// list, and its later status writes (Promoting, then Live) kept the
	// list the API server has.
	if g := v1.Status.Gate; g == nil || len(g.Criteria) != 5 || g.Verdict != v1alpha1.GatePassed {
		t.Errorf("the live version's gate result after its promotion: %+v, want the verdict and its 5 criteria", g)
	}
	var cachedV1 v1alpha1.ModelVersion
	if err := running.cache.Get(ctx, client.ObjectKeyFromObject(v1), &cachedV1); err != nil {
		t.Fatal(err)
	}
	if g := cachedV1.Status.Gate; g == nil || g.Verdict != v1alpha1.GatePassed || len(g.Criteria) != 0 {
		t.Errorf("the cached live version's gate result: %+v, want the verdict without criteria", g)
	}
	v0 := waitPhase(t, ns, initial, v1alpha1.PhaseArchived)
	if v0.Status.ArchivedTime == nil || conditionIs(v0.Status.Conditions, v1alpha1.ConditionLive) {
		t.Errorf("archived v0 status %+v", v0.Status)
	}
	eventually(t, waitFor, func() error {
		line = getLine(t, key)
		if line.Status.LiveVersion != "late-risk-v1" || line.Status.PreviousVersion != initial || line.Status.ActiveVersion != "" || line.Status.LastPromotionTime == nil {
			return fmt.Errorf("line status %+v", line.Status)
		}
		return expectCondition(line.Status.Conditions, v1alpha1.ConditionRetraining, metav1.ConditionFalse, "Promoted")
	})
	waitEvent(t, ns, lineName, "Promoted")
	waitEvent(t, ns, "late-risk-v1", "GatePassed")
	if got := metricValue(t, "plumbline_live_version_info", map[string]string{"namespace": ns, "version": "late-risk-v1"}); got != 1 {
		t.Errorf("live version info %v", got)
	}
	if got := metricValue(t, "plumbline_promotions_total", map[string]string{"namespace": ns}); got != 2 {
		t.Errorf("promotions %v, want 2 (the import and v1)", got)
	}
	if got := metricValue(t, "plumbline_retrains_finished_total", map[string]string{"namespace": ns, "reason": "Manual", "result": "Promoted"}); got != 1 {
		t.Errorf("retrains finished %v", got)
	}

	// The same token again does nothing.
	requestRetrain(t, key, "2026-11-02T09:30")
	settle()
	var versions v1alpha1.ModelVersionList
	if err := k8s.List(ctx, &versions, client.InNamespace(ns)); err != nil {
		t.Fatal(err)
	}
	if len(versions.Items) != 3 {
		t.Errorf("%d versions after repeating a token, want 3", len(versions.Items))
	}

	// A later Imported version goes through the gate, with no training.
	ext := sample(t, importedSample)
	ext.SetNamespace(ns)
	ext.SetName("late-risk-vendor-2")
	mustSet(t, ext, "spec.reason", "Manual")
	mustSet(t, ext, "spec.artifactURI", "s3://larkspur-models/late-risk/vendor-2")
	if err := k8s.Create(ctx, ext); err != nil {
		t.Fatal(err)
	}
	waitPhase(t, ns, "late-risk-vendor-2", v1alpha1.PhaseEvaluating)
	gj := waitJob(t, ns, "late-risk-vendor-2-gate")
	if e := envOf(gj.Spec.Template.Spec.Containers[0]); e["PLUMBLINE_BASELINE_URI"] != trainPrefix+"1" || e["PLUMBLINE_CANDIDATE_URI"] != "s3://larkspur-models/late-risk/vendor-2" {
		t.Errorf("imported candidate's gate env %v", e)
	}
	for _, j := range lineJobs(t, ns) {
		if j.Name == "late-risk-vendor-2-train" {
			t.Error("an Imported version was trained")
		}
	}

	cacheAgrees(t, ns)
	kubectlGet(t, ns)
}

// kubectlGet prints `kubectl get modellines,modelversions` as a person would
// see it, and checks the columns read clearly.
func kubectlGet(t *testing.T, ns string) {
	t.Helper()
	kubectl, err := exec.LookPath("kubectl")
	if err != nil || kubeconfigPath == "" {
		return
	}
	out, err := exec.Command(kubectl, "--kubeconfig", kubeconfigPath, "get", "modellines,modelversions", "-n", ns).CombinedOutput()
	if err != nil {
		t.Fatalf("kubectl get: %v\n%s", err, out)
	}
	t.Logf("kubectl get modellines,modelversions -n %s:\n%s", ns, out)
	for _, want := range []string{"LIVE", "READY", "RETRAINING", "FALLBACK", "LINE", "PHASE", "REASON", "GATE",
		"late-risk-v1", "Live", "Passed", "Archived", "Standby", "Evaluating"} {
		if !strings.Contains(string(out), want) {
			t.Errorf("kubectl get output lacks %q", want)
		}
	}
}

func toJSON(t *testing.T, v any) string {
	b, err := json.Marshal(v)
	if err != nil {
		t.Fatal(err)
	}
	return string(b)
}

func equalJSON(t *testing.T, a, b any) bool { return toJSON(t, a) == toJSON(t, b) }

func conditionIs(conds []metav1.Condition, typ string) bool {
	c := meta.FindStatusCondition(conds, typ)
	return c != nil && c.Status == metav1.ConditionTrue
}

// What a person scans with kubectl get: our own short names, Ready and
// whether a person must act, the next
// scheduled start as a time (a date column shows "<invalid>" for a future
// time), versions with their number, the status reason and the cause.
func TestKubectlColumns(t *testing.T) {
	kubectl, err := exec.LookPath("kubectl")
	if err != nil || kubeconfigPath == "" {
		t.Skip("kubectl is not installed")
	}
	ns := "kubectl-columns"
	key := liveLine(t, ns, func(o *unstructured.Unstructured) {
		mustSet(t, o, "spec.schedule", map[string]any{"cron": "0 3 * * *", "timeZone": "Europe/London"})
	})
	requestRetrain(t, key, "columns")
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseTraining)
	eventually(t, waitFor, func() error {
		if getLine(t, key).Status.NextScheduleTime == nil {
			return fmt.Errorf("no nextScheduleTime yet")
		}
		return nil
	})
	get := func(args ...string) string {
		t.Helper()
		out, err := exec.Command(kubectl, append([]string{"--kubeconfig", kubeconfigPath, "-n", ns, "get"}, args...)...).CombinedOutput()
		if err != nil {
			t.Fatalf("kubectl get %v: %v\n%s", args, err, out)
		}
		return string(out)
	}
	wide := get("mline", "-o", "wide")
	next := getLine(t, key).Status.NextScheduleTime.UTC().Format("2006-01-02T15:04:05Z")
	if strings.Contains(wide, "<invalid>") || !strings.Contains(wide, "NEXT SCHEDULE") || !strings.Contains(wide, next) {
		t.Errorf("kubectl get mline -o wide shows no next scheduled start %s:\n%s", next, wide)
	}
	// The old version serves while the new one trains: Ready, and nothing
	// for a person to do.
	if got := tableCell(wide, "late-risk", "READY"); got != "True" {
		t.Errorf("READY %q while late-risk-v0 serves and late-risk-v1 trains, want True:\n%s", got, wide)
	}
	if got := tableCell(wide, "late-risk", "ACTION REQUIRED"); got != "False" {
		t.Errorf("ACTION REQUIRED %q, want False:\n%s", got, wide)
	}
	versions := get("mver")
	for _, want := range []string{"NUMBER", "PHASE", "REASON", "CAUSE", "late-risk-v1", "TrainingStarted", "Manual", "Initial"} {
		if !strings.Contains(versions, want) {
			t.Errorf("kubectl get mver lacks %q:\n%s", want, versions)
		}
	}
	if out, err := exec.Command(kubectl, "--kubeconfig", kubeconfigPath, "-n", ns, "get", "ml").CombinedOutput(); err == nil {
		t.Errorf("ml is still a short name of ours:\n%s", out)
	}
}
