package manager

import (
	"strings"
	"testing"

	appsv1 "k8s.io/api/apps/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/labels"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// The cache keeps what the manager reads: the serving selector limits the
// Deployments, and no object keeps its managedFields or kubectl's
// last-applied copy (other annotations stay).
func TestCacheOptions(t *testing.T) {
	if _, err := cacheOptions(Options{ServingSelector: "plumbline.dev/serving in (true"}); err == nil || !strings.Contains(err.Error(), "--serving-selector") {
		t.Fatalf("a bad selector: %v, want an error naming --serving-selector", err)
	}
	all, err := cacheOptions(Options{})
	if err != nil {
		t.Fatal(err)
	}
	for obj, by := range all.ByObject {
		switch obj.(type) {
		case *appsv1.Deployment:
			t.Fatal("without a serving selector every Deployment is cached, but one is set")
		case *v1alpha1.ModelVersion:
			// History versions are in the history cache, as metadata.
			if by.Label == nil || by.Label.Matches(labels.Set{v1alpha1.HistoryLabel: "Archived"}) || !by.Label.Matches(labels.Set{"app": "x"}) {
				t.Errorf("ModelVersion selector %v, want every version but the history ones", by.Label)
			}
		}
	}
	if in, err := historySelector(true); err != nil || !in.Matches(labels.Set{v1alpha1.HistoryLabel: "Rejected"}) || in.Matches(labels.Set{}) {
		t.Errorf("history cache selector %v (%v), want the history versions only", in, err)
	}
	o, err := cacheOptions(Options{ServingSelector: "plumbline.dev/serving=true"})
	if err != nil {
		t.Fatal(err)
	}
	var sel labels.Selector
	for obj, by := range o.ByObject {
		if _, ok := obj.(*appsv1.Deployment); ok {
			sel = by.Label
		}
	}
	if sel == nil || !sel.Matches(labels.Set{"plumbline.dev/serving": "true"}) || sel.Matches(labels.Set{"app": "web"}) {
		t.Fatalf("Deployment selector %v", sel)
	}

	dep := &appsv1.Deployment{ObjectMeta: metav1.ObjectMeta{Name: "late-risk-scorer",
		Annotations:   map[string]string{lastApplied: `{"big":"copy"}`, "larkspur.example/owner": "routing"},
		ManagedFields: []metav1.ManagedFieldsEntry{{Manager: "kubectl"}}}}
	out, err := o.DefaultTransform(dep)
	if err != nil {
		t.Fatal(err)
	}
	got := out.(*appsv1.Deployment)
	if len(got.ManagedFields) != 0 {
		t.Error("managedFields kept")
	}
	if _, ok := got.Annotations[lastApplied]; ok {
		t.Error("the last-applied copy kept")
	}
	if got.Annotations["larkspur.example/owner"] != "routing" {
		t.Errorf("other annotations lost: %v", got.Annotations)
	}
}

// A cached version keeps its gate verdict, reason and message (the
// conditions are made of them) but not the per-criterion results.
func TestCacheLeavesOutGateCriteria(t *testing.T) {
	o, err := cacheOptions(Options{})
	if err != nil {
		t.Fatal(err)
	}
	v := &v1alpha1.ModelVersion{ObjectMeta: metav1.ObjectMeta{Name: "late-risk-v4"},
		Status: v1alpha1.ModelVersionStatus{Phase: v1alpha1.PhaseLive, Gate: &v1alpha1.GateResult{
			Verdict: v1alpha1.GatePassed, Reason: "CriteriaMet", Message: "all 2 criteria met on 5000 rows", Rows: 5000,
			Criteria: []v1alpha1.CriterionResult{{Metric: "roc_auc", Passed: true}, {Metric: "recall", Segment: "depot=north", Passed: true}}}}}
	out, err := o.DefaultTransform(v)
	if err != nil {
		t.Fatal(err)
	}
	g := out.(*v1alpha1.ModelVersion).Status.Gate
	if g == nil || g.Criteria != nil {
		t.Fatalf("cached gate result %+v, want it without criteria", g)
	}
	if g.Verdict != v1alpha1.GatePassed || g.Reason != "CriteriaMet" || g.Message == "" || g.Rows != 5000 {
		t.Errorf("cached gate result lost more than the criteria: %+v", g)
	}
	if _, err := o.DefaultTransform(&v1alpha1.ModelVersion{}); err != nil {
		t.Errorf("a version without a gate result: %v", err)
	}
}
