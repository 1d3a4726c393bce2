package integration

import (
	"context"
	"testing"

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
