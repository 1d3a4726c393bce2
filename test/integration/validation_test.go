package integration

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	corev1 "k8s.io/api/core/v1"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/api/v1alpha1"
)

func createNamespace(t *testing.T, name string) {
	t.Helper()
	ns := &corev1.Namespace{ObjectMeta: metav1.ObjectMeta{Name: name}}
	if err := k8s.Create(context.Background(), ns); err != nil && !apierrors.IsAlreadyExists(err) {
		t.Fatal(err)
	}
}

// Every manifest in config/samples is accepted by the real API server with
// the real CRDs.
func TestSamplesAccepted(t *testing.T) {
	ctx := context.Background()
	dir := filepath.Join(repoRoot, "config", "samples")
	entries, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	var objs []*unstructured.Unstructured
	for _, e := range entries {
		if e.IsDir() || !strings.HasSuffix(e.Name(), ".yaml") || e.Name() == "kustomization.yaml" {
			continue
		}
		objs = append(objs, readManifests(t, filepath.Join(dir, e.Name()))...)
	}
	kinds := map[string]int{}
	// The namespace goes first.
	for _, o := range objs {
		if o.GetKind() == "Namespace" {
			if err := k8s.Create(ctx, o); err != nil && !apierrors.IsAlreadyExists(err) {
				t.Fatalf("Namespace %s: %v", o.GetName(), err)
			}
			kinds["Namespace"]++
		}
	}
	for _, o := range objs {
		if o.GetKind() == "Namespace" {
			continue
		}
		if err := k8s.Create(ctx, o); err != nil {
			t.Errorf("%s %s refused: %v", o.GetKind(), o.GetName(), err)
		}
		kinds[o.GetKind()]++
	}
	for _, k := range []string{"Namespace", "Deployment", "ModelLine", "ModelVersion"} {
		if kinds[k] == 0 {
			t.Errorf("config/samples has no %s", k)
		}
	}
	if kinds["ModelVersion"] < 2 {
		t.Errorf("config/samples should hold an Imported and a RuleBased version, has %d versions", kinds["ModelVersion"])
	}

	// The sample line uses every part of the spec, so it must be judged
	// valid by the controller too, and its Deployment is there.
	eventually(t, waitFor, func() error {
		var line v1alpha1.ModelLine
		if err := k8s.Get(ctx, client.ObjectKey{Namespace: "larkspur", Name: "late-risk"}, &line); err != nil {
			return err
		}
		return expectCondition(line.Status.Conditions, v1alpha1.ConditionActionRequired, metav1.ConditionFalse, v1alpha1.ReasonNothingRequired)
	})
}

// malformed is a manifest the API server must refuse, and what its error
// must say.
type malformed struct {
	name   string
	base   string // sample file the case starts from
	mutate func(t *testing.T, o *unstructured.Unstructured)
	// want are substrings of the error; the first names the field.
	want []string
}

func set(path string, v any) func(*testing.T, *unstructured.Unstructured) {
	return func(t *testing.T, o *unstructured.Unstructured) { mustSet(t, o, path, v) }
}

func sets(pairs ...any) func(*testing.T, *unstructured.Unstructured) {
	return func(t *testing.T, o *unstructured.Unstructured) {
		for i := 0; i+1 < len(pairs); i += 2 {
			mustSet(t, o, pairs[i].(string), pairs[i+1])
		}
	}
}

const (
	lineSample     = "larkspur_v1alpha1_modelline.yaml"
	importedSample = "larkspur_v1alpha1_modelversion_imported.yaml"
	rulesSample    = "larkspur_v1alpha1_modelversion_rulebased.yaml"
)

func malformedCases() []malformed {
	trigger := func(name string, n int) map[string]any {
		return map[string]any{"name": name, "query": "up", "below": 1.0, "forSeconds": int64(600), "everySeconds": int64(60)}
	}
	manyTriggers := func() []any {
		var l []any
		for i := 0; i < 17; i++ {
			l = append(l, trigger(fmt.Sprintf("t%d", i), i))
		}
		return l
	}
	return []malformed{
		{"trigger with below and above", lineSample, set("spec.triggers[0].above", 0.9),
			[]string{"spec.triggers[0]", "set exactly one of below and above"}},
		{"trigger with neither below nor above", lineSample, set("spec.triggers[0].below", nil),
			[]string{"spec.triggers[0]", "set exactly one of below and above"}},
		{"trigger window shorter than its period", lineSample, sets("spec.triggers[0].forSeconds", int64(120), "spec.triggers[0].everySeconds", int64(300)),
			[]string{"spec.triggers[0]", "forSeconds must be at least everySeconds"}},
		{"trigger evaluated too often", lineSample, set("spec.triggers[0].everySeconds", int64(5)),
			[]string{"spec.triggers[0].everySeconds", "greater than or equal to 10"}},
		{"duplicate trigger names", lineSample, set("spec.triggers[1].name", "auc-drop"),
			[]string{"spec.triggers[1]", "Duplicate value"}},
		{"too many triggers", lineSample, set("spec.triggers", manyTriggers()),
			[]string{"spec.triggers", "must have at most 16 items"}},
		{"trigger name not a DNS label", lineSample, set("spec.triggers[0].name", "AUC Drop"),
			[]string{"spec.triggers[0].name", "should match"}},
		{"query too long", lineSample, set("spec.triggers[0].query", strings.Repeat("x", 4097)),
			[]string{"spec.triggers[0].query", "4096"}},
		{"gate criterion that judges nothing", lineSample, set("spec.gate.criteria[0].minimum", nil),
			[]string{"spec.gate.criteria[0]", "set at least one of minimum, maximum and maxRegression"}},
		{"confidence of 1", lineSample, set("spec.gate.criteria[1].confidence", 1.0),
			[]string{"spec.gate.criteria[1]", "confidence must be strictly between 0.5 and 1"}},
		{"confidence of 0.5", lineSample, set("spec.gate.criteria[1].confidence", 0.5),
			[]string{"spec.gate.criteria[1]", "confidence must be strictly between 0.5 and 1"}},
		{"unknown metric without better", lineSample, set("spec.gate.criteria[0].metric", "on_time_share"),
			[]string{"spec.gate.criteria[0]", "set better (Higher or Lower)"}},
		{"negative maxRegression", lineSample, set("spec.gate.criteria[1].maxRegression", -0.01),
			[]string{"spec.gate.criteria[1].maxRegression", "greater than or equal to 0"}},
		{"no gate criteria", lineSample, set("spec.gate.criteria", []any{}),
			[]string{"spec.gate.criteria", "at least 1 items"}},
		{"approval mode unknown", lineSample, set("spec.gate.approval", "Sometimes"),
			[]string{"spec.gate.approval", "Unsupported value", "Automatic", "Manual"}},
		{"no gate", lineSample, set("spec.gate", nil),
			[]string{"spec.gate", "Required value"}},
		{"deployment name with capitals", lineSample, set("spec.serving.deploymentName", "LateRisk"),
			[]string{"spec.serving.deploymentName", "should match"}},
		{"no container name", lineSample, set("spec.serving.containerName", nil),
			[]string{"spec.serving.containerName", "Required value"}},
		{"artifact env not a variable name", lineSample, set("spec.serving.artifactEnv", "model-uri"),
			[]string{"spec.serving.artifactEnv", "should match"}},
		{"schedule without training", lineSample, set("spec.training", nil),
			[]string{"spec", "spec.training is required when spec.schedule or spec.triggers is set"}},
		{"negative cooldown", lineSample, set("spec.cooldownSeconds", int64(-1)),
			[]string{"spec.cooldownSeconds", "greater than or equal to 0"}},
		{"guard probation shorter than its window", lineSample, set("spec.guard.probationSeconds", int64(600)),
			[]string{"spec.guard", "probationSeconds must be at least forSeconds"}},
		{"guard with below and above", lineSample, set("spec.guard.above", 0.99),
			[]string{"spec.guard", "set exactly one of below and above"}},
		{"data-quality check without threshold", lineSample, set("spec.checks.dataQuality[0].above", nil),
			[]string{"spec.checks.dataQuality[0]", "set exactly one of below and above"}},
		{"negative fresh-data minimum", lineSample, set("spec.checks.freshData.atLeast", -5.0),
			[]string{"spec.checks.freshData.atLeast", "greater than or equal to 0"}},
		{"fresh data with nothing to count", lineSample, set("spec.checks.freshData.query", nil),
			[]string{"spec.checks", "freshData.query is required unless a jobTemplate check Job counts the rows"}},
		{"negative starting deadline", lineSample, set("spec.schedule.startingDeadlineSeconds", int64(-60)),
			[]string{"spec.schedule.startingDeadlineSeconds", "greater than or equal to 0"}},
		{"version source unknown", importedSample, set("spec.source", "Scraped"),
			[]string{"spec.source", "Unsupported value", "Trained", "Imported", "RuleBased"}},
		{"rule-based version without artifact", rulesSample, set("spec.artifactURI", nil),
			[]string{"spec", "artifactURI is required for a RuleBased version"}},
		{"imported version without artifact", importedSample, set("spec.artifactURI", nil),
			[]string{"spec", "artifactURI is required for an Imported version"}},
		{"decision other than Approved or Rejected", importedSample, set("spec.decision", "Maybe"),
			[]string{"spec.decision", "Unsupported value", "Approved", "Rejected"}},
		{"version cause unknown", importedSample, set("spec.cause", "Because"),
			[]string{"spec.cause", "should match"}},
		{"version without line", importedSample, set("spec.line", nil),
			[]string{"spec.line", "Required value"}},
	}
}

// A table of malformed manifests is refused at admission, each error naming
// the field and the fix. Dry-run creates go through the whole validation
// without storing anything.
func TestMalformedRefused(t *testing.T) {
	createNamespace(t, "larkspur")
	cases := malformedCases()
	if len(cases) < 15 {
		t.Fatalf("want at least 15 malformed manifests, have %d", len(cases))
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			o := sample(t, tc.base)
			o.SetName("malformed")
			// The unmodified sample is accepted: the mutation is what fails.
			if err := k8s.Create(context.Background(), o.DeepCopy(), client.DryRunAll); err != nil {
				t.Fatalf("unmodified %s refused: %v", tc.base, err)
			}
			tc.mutate(t, o)
			err := k8s.Create(context.Background(), o, client.DryRunAll)
			if err == nil {
				t.Fatalf("accepted; want an error naming %s", tc.want[0])
			}
			if !apierrors.IsInvalid(err) {
				t.Fatalf("want an Invalid error, got %v", err)
			}
			mustContain(t, "error", err.Error(), tc.want...)
		})
	}
}

// Fields that a version must keep are refused on update.
func TestVersionImmutableFields(t *testing.T) {
	ctx := context.Background()
	createNamespace(t, "immutable")
	cases := []struct {
		name   string
		base   string
		before map[string]any
		change map[string]any
		want   []string
	}{
		{"line", importedSample, nil, map[string]any{"spec.line": "other-line"}, []string{"spec.line", "line is immutable"}},
		{"source", rulesSample, nil, map[string]any{"spec.source": "Imported"}, []string{"spec.source", "source is immutable"}},
		{"artifact", importedSample, nil, map[string]any{"spec.artifactURI": "s3://elsewhere/x"}, []string{"spec", "artifactURI cannot be changed"}},
		{"decision changed", importedSample, map[string]any{"spec.decision": "Approved"}, map[string]any{"spec.decision": "Rejected"}, []string{"spec", "decision cannot be changed or removed"}},
		{"decision removed", importedSample, map[string]any{"spec.decision": "Rejected"}, map[string]any{"spec.decision": nil}, []string{"spec", "decision cannot be changed or removed"}},
	}
	for i, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			o := sample(t, tc.base)
			o.SetNamespace("immutable")
			o.SetName(fmt.Sprintf("immutable-%d", i))
			for p, v := range tc.before {
				mustSet(t, o, p, v)
			}
			if err := k8s.Create(ctx, o); err != nil {
				t.Fatal(err)
			}
			var err error
			// Retry on conflicts: the controller adopts the version meanwhile.
			for attempt := 0; attempt < 5; attempt++ {
				cur := &unstructured.Unstructured{}
				cur.SetGroupVersionKind(o.GroupVersionKind())
				if err = k8s.Get(ctx, client.ObjectKeyFromObject(o), cur); err != nil {
					t.Fatal(err)
				}
				for p, v := range tc.change {
					mustSet(t, cur, p, v)
				}
				if err = k8s.Update(ctx, cur); !apierrors.IsConflict(err) {
					break
				}
			}
			if err == nil {
				t.Fatalf("update accepted; want an error naming %s", tc.want[0])
			}
			mustContain(t, "error", err.Error(), tc.want...)
		})
	}

	// A first decision on a version that had none is allowed.
	o := sample(t, importedSample)
	o.SetNamespace("immutable")
	o.SetName("first-decision")
	if err := k8s.Create(ctx, o); err != nil {
		t.Fatal(err)
	}
	eventually(t, waitFor, func() error {
		var v v1alpha1.ModelVersion
		if err := k8s.Get(ctx, client.ObjectKeyFromObject(o), &v); err != nil {
			return err
		}
		v.Spec.Decision = v1alpha1.DecisionApproved
		return k8s.Update(ctx, &v)
	})
}

// A line that sets only what it must gets the defaults a person expects.
func TestDefaults(t *testing.T) {
	ctx := context.Background()
	createNamespace(t, "defaults")
	o := fromYAML(t, `
apiVersion: plumbline.dev/v1alpha1
kind: ModelLine
metadata: {name: minimal, namespace: defaults}
spec:
  serving: {deploymentName: scorer, containerName: scorer}
  training:
    artifactURI: s3://m/{{.Version}}
    jobTemplate: {spec: {template: {spec: {containers: [{name: train, image: trainer}]}}}}
  triggers:
    - {name: drop, query: quality, below: 0.8, forSeconds: 600}
  gate:
    criteria: [{metric: accuracy, maxRegression: 0.01}]
    jobTemplate: {spec: {template: {spec: {containers: [{name: evaluate, image: evaluator}]}}}}
  fallback: {ruleBasedVersion: minimal-rules}
  guard: {query: quality, below: 0.7, forSeconds: 600, probationSeconds: 3600}
`)
	if err := k8s.Create(ctx, o); err != nil {
		t.Fatal(err)
	}
	var line v1alpha1.ModelLine
	if err := k8s.Get(ctx, client.ObjectKeyFromObject(o), &line); err != nil {
		t.Fatal(err)
	}
	s := line.Spec
	checks := []struct {
		field     string
		got, want any
	}{
		{"spec.serving.artifactEnv", s.Serving.ArtifactEnv, "MODEL_URI"},
		{"spec.cooldownSeconds", deref(s.CooldownSeconds), int32(3600)},
		{"spec.historyLimit", deref(s.HistoryLimit), int32(10)},
		{"spec.triggers[0].everySeconds", s.Triggers[0].EverySeconds, int32(60)},
		{"spec.gate.approval", s.Gate.Approval, v1alpha1.ApprovalAutomatic},
		{"spec.gate.criteria[0].confidence", deref(s.Gate.Criteria[0].Confidence), 0.95},
		{"spec.fallback.previous", deref(s.Fallback.Previous), true},
		{"spec.guard.everySeconds", s.Guard.EverySeconds, int32(60)},
		{"spec.suspend", s.Suspend, false},
	}
	for _, c := range checks {
		if c.got != c.want {
			t.Errorf("%s defaulted to %v, want %v", c.field, c.got, c.want)
		}
	}
}

// Every metric plumbline evaluate reports is accepted without better;
// the CEL rule and the Go table are the same list.
func TestKnownMetricsNeedNoBetter(t *testing.T) {
	for _, m := range v1alpha1.KnownMetrics() {
		o := sample(t, lineSample)
		o.SetName("metric-" + strings.ReplaceAll(m, "_", "-"))
		crit := map[string]any{"metric": m, "maxRegression": 0.01}
		mustSet(t, o, "spec.gate.criteria", []any{crit})
		if err := k8s.Create(context.Background(), o, client.DryRunAll); err != nil {
			t.Errorf("metric %s refused: %v", m, err)
		}
	}
	o := sample(t, lineSample)
	o.SetName("own-metric")
	mustSet(t, o, "spec.gate.criteria", []any{map[string]any{"metric": "on_time_share", "better": "Higher", "minimum": 0.9}})
	if err := k8s.Create(context.Background(), o, client.DryRunAll); err != nil {
		t.Errorf("own metric with better set refused: %v", err)
	}
}

func deref[T any](p *T) any {
	if p == nil {
		return nil
	}
	return *p
}

// The README's full sample is a line the API server accepts, so a reader
// who copies it gets no surprise.
func TestReadmeSampleAccepted(t *testing.T) {
	raw, err := os.ReadFile(filepath.Join(repoRoot, "README.md"))
	if err != nil {
		t.Fatal(err)
	}
	text := string(raw)
	i := strings.Index(text, "## A full sample")
	if i < 0 {
		t.Fatal("the README has no full sample")
	}
	text = text[i:]
	start := strings.Index(text, "```yaml\n")
	end := strings.Index(text[start+8:], "```")
	if start < 0 || end < 0 {
		t.Fatal("the README's full sample has no yaml block")
	}
	o := fromYAML(t, text[start+8:start+8+end])
	o.SetNamespace("readme-sample")
	createNamespace(t, o.GetNamespace())
	if err := k8s.Create(context.Background(), o, client.DryRunAll); err != nil {
		t.Errorf("the API server refuses the README's sample: %v", err)
	}
}
