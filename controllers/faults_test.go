package controllers

import (
	"context"
	"testing"
	"time"

	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/client/interceptor"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// A switch of what serves (the guard's rollback, a person's rollback) is
// recorded in one pass and the Deployment patched in a later one. When the
// record is refused once (a conflict), the Deployment must still serve what
// it served, so the next pass records the right restore target: the version
// being replaced, not the one switched to.
func TestSwitchPatchesTheDeploymentOnlyAfterItIsRecorded(t *testing.T) {
	cases := []struct {
		name string
		// start makes the world ask for a switch to late-risk-v0.
		start func(w *world)
		kind  v1alpha1.PromotionKind
	}{
		{"guard rollback", func(w *world) {
			w.prom.value = func(string, time.Time) float64 { return 0.5 } // regressed
		}, v1alpha1.PromotionRollback},
		{"a person's rollback", func(w *world) {
			w.annotate(v1alpha1.RollbackRequestAnnotation, "late-risk-v0")
		}, v1alpha1.PromotionRequested},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			refused := 0
			w := guardedWorld(t, refuseFirstVersionStatus(&refused))
			v1URI := w.version("late-risk-v1").Spec.ArtifactURI
			v0URI := w.version("late-risk-v0").Spec.ArtifactURI
			c.start(w)

			// Pass 1: the switch is decided, its record refused.
			if _, err := w.pass(); err != nil {
				t.Fatalf("a conflict is retried, not an error: %v", err)
			}
			if refused != 1 {
				t.Fatalf("the version's status write was refused %d times, want 1", refused)
			}
			if got := servedBy(w.deployment(), w.line().Spec.Serving); got.version != "late-risk-v1" || got.artifact != v1URI {
				t.Fatalf("after the refused record the Deployment serves %+v; it must not be patched before the switch is recorded", got)
			}

			// Pass 2: recorded, with what serves now as the restore target.
			w.mustPass()
			v0 := w.version("late-risk-v0")
			if p := v0.Status.Promotion; p == nil || p.Kind != c.kind || p.FromVersion != "late-risk-v1" || p.FromArtifactURI != v1URI {
				t.Fatalf("recorded switch %+v; want kind %s from late-risk-v1 (%s)", p, c.kind, v1URI)
			}
			if v0.Status.Phase != v1alpha1.PhasePromoting {
				t.Fatalf("v0 is %s, want Promoting", v0.Status.Phase)
			}
			if got := servedBy(w.deployment(), w.line().Spec.Serving); got.version != "late-risk-v1" {
				t.Fatalf("the pass that recorded the switch patched the Deployment (%+v)", got)
			}

			// Pass 3 patches, pass 4 sees the rollout through.
			w.mustPass()
			if got := servedBy(w.deployment(), w.line().Spec.Serving); got.version != "late-risk-v0" || got.artifact != v0URI {
				t.Fatalf("after the recorded switch the Deployment serves %+v, want late-risk-v0", got)
			}
			w.rolledOut()
			w.mustPass()
			if v := w.version("late-risk-v0"); v.Status.Phase != v1alpha1.PhaseLive {
				t.Fatalf("v0 is %s after its rollout, want Live", v.Status.Phase)
			}
			if v := w.version("late-risk-v1"); v.Status.Phase != v1alpha1.PhaseArchived {
				t.Fatalf("v1 is %s, want Archived", v.Status.Phase)
			}
		})
	}
}

// countingReader counts the reads of ModelLines that go past the cache.
type countingReader struct {
	client.Reader
	lineReads int
}

func (c *countingReader) Get(ctx context.Context, key client.ObjectKey, obj client.Object, opts ...client.GetOption) error {
	if _, ok := obj.(*v1alpha1.ModelLine); ok {
		c.lineReads++
	}
	return c.Reader.Get(ctx, key, obj, opts...)
}

// The cache can lag behind the controller's own write, so a pass on a line
// whose cached copy is not the one last written reads it from the API
// server. Once it has read a newer copy (someone else's edit), later passes
// on that copy use the cache again; and a deleted line is forgotten.
func TestFreshReadsPastTheCacheOnlyWhileItLags(t *testing.T) {
	w := newWorld(t, interceptor.Funcs{}, passLine(), scorerDeployment("", "s3://larkspur/rules"))
	reader := &countingReader{Reader: w.c}
	w.r.APIReader = reader

	w.mustPass() // writes the line's first status
	if reader.lineReads != 0 {
		t.Fatalf("the first pass read the line %d times past the cache", reader.lineReads)
	}
	w.annotate("larkspur.example/owner", "routing-team") // someone else's edit
	w.mustPass()
	if reader.lineReads != 1 {
		t.Fatalf("after an edit by someone else the line was read %d times past the cache, want 1", reader.lineReads)
	}
	for i := 0; i < 3; i++ {
		w.mustPass()
	}
	if reader.lineReads != 1 {
		t.Errorf("passes on an unchanged line read it past the cache: %d reads in all, want 1", reader.lineReads)
	}

	if err := w.c.Delete(context.Background(), w.line()); err != nil {
		t.Fatal(err)
	}
	w.mustPass()
	if _, ok := w.r.written.Load(w.key); ok {
		t.Error("a deleted line is still remembered")
	}
}
