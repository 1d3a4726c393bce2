package manager

import (
	"strings"
	"testing"

	appsv1 "k8s.io/api/apps/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/labels"
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
	for obj := range all.ByObject {
		if _, ok := obj.(*appsv1.Deployment); ok {
			t.Fatal("without a serving selector every Deployment is cached, but one is set")
		}
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
