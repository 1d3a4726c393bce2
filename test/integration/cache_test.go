package integration

import (
	"context"
	"fmt"
	"testing"

	"k8s.io/apimachinery/pkg/api/equality"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"

	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// The manager's cache keeps objects without managedFields (about half of
// each object's bytes, never read), while the API server has them.
func TestCacheStripsManagedFields(t *testing.T) {
	key := liveLine(t, "cache-stripped", nil)
	ctx := context.Background()
	var stored v1alpha1.ModelLine
	if err := k8s.Get(ctx, key, &stored); err != nil {
		t.Fatal(err)
	}
	if len(stored.ManagedFields) == 0 {
		t.Fatal("the API server's copy has no managedFields: nothing to strip")
	}
	if running.cache == nil {
		t.Fatal("no manager is running")
	}
	var cached v1alpha1.ModelLine
	if err := running.cache.Get(ctx, key, &cached); err != nil {
		t.Fatal(err)
	}
	if len(cached.ManagedFields) != 0 {
		t.Errorf("the manager's cached line keeps %d managedFields entries", len(cached.ManagedFields))
	}
	var versions v1alpha1.ModelVersionList
	if err := running.cache.List(ctx, &versions, client.InNamespace(key.Namespace)); err != nil || len(versions.Items) == 0 {
		t.Fatalf("cached versions: %v", err)
	}
	for _, v := range versions.Items {
		if len(v.ManagedFields) != 0 {
			t.Errorf("the cached version %s keeps managedFields", v.Name)
		}
	}
}

// cacheAgrees checks that the manager's cached versions of namespace ns
// are the API server's, but for what the cache leaves out: a pass works on
// working copies that share maps and pointers with the cache, and a change
// made in place would show here as a cached object that differs from the
// server's at the same resourceVersion.
func cacheAgrees(t *testing.T, ns string) {
	t.Helper()
	ctx := context.Background()
	eventually(t, waitFor, func() error {
		var stored, cached v1alpha1.ModelVersionList
		if err := k8s.List(ctx, &stored, client.InNamespace(ns)); err != nil {
			return err
		}
		if err := running.cache.List(ctx, &cached, client.InNamespace(ns)); err != nil {
			return err
		}
		byName := map[string]*v1alpha1.ModelVersion{}
		for i := range cached.Items {
			byName[cached.Items[i].Name] = &cached.Items[i]
		}
		for i := range stored.Items {
			s := &stored.Items[i]
			c := byName[s.Name]
			if _, history := s.Labels[v1alpha1.HistoryLabel]; history {
				// Kept as metadata only, in the history cache.
				if c != nil {
					return fmt.Errorf("history version %s is still in the main cache", s.Name)
				}
				continue
			}
			if c == nil || c.ResourceVersion != s.ResourceVersion {
				return fmt.Errorf("the cache has not caught up with version %s yet", s.Name)
			}
			s.ManagedFields = nil
			if s.Status.Gate != nil {
				s.Status.Gate.Criteria = nil
			}
			if !equality.Semantic.DeepEqual(s.ObjectMeta, c.ObjectMeta) || !equality.Semantic.DeepEqual(s.Spec, c.Spec) || !equality.Semantic.DeepEqual(s.Status, c.Status) {
				t.Fatalf("the cached version %s differs from the API server's at the same resourceVersion %s (changed in place?):\ncached %s\nstored %s",
					s.Name, s.ResourceVersion, toJSON(t, c), toJSON(t, s))
			}
		}
		return nil
	})
}

// A Trained version a person creates without an artifact gets one named by
// the line's template and a number; the pass that names it patches a copy,
// not the cached version it works from.
func TestPersonsTrainedVersionIsNamed(t *testing.T) {
	key := liveLine(t, "cache-named", nil)
	ctx := context.Background()
	v := &v1alpha1.ModelVersion{ObjectMeta: metav1.ObjectMeta{Namespace: key.Namespace, Name: "late-risk-by-hand"},
		Spec: v1alpha1.ModelVersionSpec{Line: key.Name, Source: v1alpha1.SourceTrained, Cause: v1alpha1.ReasonManual}}
	if err := k8s.Create(ctx, v); err != nil {
		t.Fatal(err)
	}
	eventually(t, waitFor, func() error {
		got := getVersion(t, key.Namespace, v.Name)
		if got.Spec.ArtifactURI == "" || got.Labels["plumbline.dev/number"] == "" {
			return fmt.Errorf("artifact %q, labels %v", got.Spec.ArtifactURI, got.Labels)
		}
		return nil
	})
	waitJob(t, key.Namespace, v.Name+"-train")
	cacheAgrees(t, key.Namespace)
}
