package modelline

import (
	"context"
	"fmt"
	"sort"
	"strconv"

	corev1 "k8s.io/api/core/v1"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/types"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/log"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// byAge sorts versions oldest first (creation time, then name), the order in
// which a line works through them.
func byAge(vs []*v1alpha1.ModelVersion) {
	sort.SliceStable(vs, func(i, j int) bool {
		a, b := vs[i], vs[j]
		if !a.CreationTimestamp.Equal(&b.CreationTimestamp) {
			return a.CreationTimestamp.Before(&b.CreationTimestamp)
		}
		return a.Name < b.Name
	})
}

// entry is one version as pruning sees it: a version the pass works on, or
// the metadata of a history version (labelled v1alpha1.HistoryLabel, kept
// out of the manager's main cache).
type entry struct {
	meta      *metav1.ObjectMeta
	phase     v1alpha1.VersionPhase
	ruleBased bool
}

// entries are the pass's versions and the line's history versions, each
// once (a version just labelled can be in both caches for a moment).
func entries(vw *view) []entry {
	out := make([]entry, 0, len(vw.versions)+len(vw.history))
	seen := make(map[string]bool, len(vw.versions))
	for _, v := range vw.versions {
		seen[v.Name] = true
		out = append(out, entry{meta: &v.ObjectMeta, phase: v.Status.Phase, ruleBased: v.Spec.Source == v1alpha1.SourceRuleBased})
	}
	for _, h := range vw.history {
		if !seen[h.Name] {
			out = append(out, entry{meta: &h.ObjectMeta, phase: v1alpha1.VersionPhase(h.Labels[v1alpha1.HistoryLabel])})
		}
	}
	return out
}

// pruneList returns the versions history no longer keeps: finished versions
// (Archived, Rejected, Failed) beyond the newest limit, counting the
// history versions. The live version, the previous one and rule-based
// versions are never pruned, whatever their phase.
func pruneList(all []entry, live, previous string, limit int32) []entry {
	var finished []entry
	for _, e := range all {
		if !e.phase.Finished() || e.meta.Name == live || e.meta.Name == previous || e.ruleBased || e.meta.DeletionTimestamp != nil {
			continue
		}
		finished = append(finished, e)
	}
	sort.SliceStable(finished, func(i, j int) bool {
		a, b := finished[i].meta, finished[j].meta
		if !a.CreationTimestamp.Equal(&b.CreationTimestamp) {
			return a.CreationTimestamp.Before(&b.CreationTimestamp)
		}
		return a.Name < b.Name
	})
	limit = max(limit, 0)
	if int32(len(finished)) <= limit {
		return nil
	}
	return finished[:len(finished)-int(limit)]
}

// prune deletes the finished versions history no longer keeps.
func (r *Reconciler) prune(ctx context.Context, p *pass) error {
	line, vw := p.line, p.vw
	limit := int32(10)
	if line.Spec.HistoryLimit != nil {
		limit = *line.Spec.HistoryLimit
	}
	live, previous := "", ""
	if l := vw.live(); l != nil {
		live = l.Name
		if l.Status.Promotion != nil {
			previous = l.Status.Promotion.FromVersion
		}
	}
	for _, e := range pruneList(entries(vw), live, previous, limit) {
		gone := &v1alpha1.ModelVersion{ObjectMeta: metav1.ObjectMeta{Namespace: e.meta.Namespace, Name: e.meta.Name}}
		if err := r.Delete(ctx, gone, client.Preconditions{UID: &e.meta.UID}); client.IgnoreNotFound(err) != nil {
			return fmt.Errorf("prune version %s: %w", e.meta.Name, err)
		}
		now := p.now
		e.meta.DeletionTimestamp = &now // the pass writes nothing to it now
		p.eventFor("Prune/"+e.meta.Name, line, nil, corev1.EventTypeNormal, "Pruned", "deleted %s version %s: history keeps %d finished versions (spec.historyLimit)", e.phase, e.meta.Name, limit)
	}
	return nil
}

// forHistory returns the versions that no longer bear on the line's
// decisions and can be kept as metadata only: finished versions the line
// controls that are not live, not the one the live version replaced, not
// what the Deployment serves, not rule-based, and not the newest of
// anything a pass reads from its versions (the last outcome, the newest
// data window, trained or not, the highest promotion sequence and version
// number, the last automatic rollback). Every summary the line derives from
// its versions is therefore the same with them left out; a version is never
// changed once finished, so it stays so.
func forHistory(line *v1alpha1.ModelLine, vw *view) []*v1alpha1.ModelVersion {
	keep := map[*v1alpha1.ModelVersion]bool{}
	if l := vw.live(); l != nil {
		keep[l] = true
		if l.Status.Promotion != nil {
			if prev := vw.version(l.Status.Promotion.FromVersion); prev != nil {
				keep[prev] = true
			}
		}
	}
	if vw.deployment != nil {
		if v := vw.version(servedBy(vw.deployment, line.Spec.Serving).version); v != nil {
			keep[v] = true
		}
	}
	newest := func(ok func(*v1alpha1.ModelVersion) bool, after func(a, b *v1alpha1.ModelVersion) bool) {
		var best *v1alpha1.ModelVersion
		for _, v := range vw.versions { // oldest first: the last of equals wins
			if ok(v) && (best == nil || !after(best, v)) {
				best = v
			}
		}
		if best != nil {
			keep[best] = true
		}
	}
	anyAge := func(a, b *v1alpha1.ModelVersion) bool { return false }
	// The line's last outcome (the Retraining condition).
	newest(func(v *v1alpha1.ModelVersion) bool {
		return v.Spec.Source != v1alpha1.SourceRuleBased && (v.Status.Phase.Finished() || v.Status.Phase == v1alpha1.PhaseLive)
	}, anyAge)
	// The last retrain, and the start of the next data window.
	dataTo := func(a, b *v1alpha1.ModelVersion) bool { return a.Status.DataTo.After(b.Status.DataTo.Time) }
	newest(func(v *v1alpha1.ModelVersion) bool { return v.Status.DataTo != nil }, dataTo)
	newest(func(v *v1alpha1.ModelVersion) bool {
		return v.Status.DataTo != nil && conditionIs(v.Status.Conditions, v1alpha1.ConditionTrained, metav1.ConditionTrue)
	}, dataTo)
	// The next promotion's sequence.
	newest(func(v *v1alpha1.ModelVersion) bool { return promotionSequence(v) > 0 },
		func(a, b *v1alpha1.ModelVersion) bool { return promotionSequence(a) > promotionSequence(b) })
	// The version count.
	number := func(v *v1alpha1.ModelVersion) int64 {
		n, err := strconv.ParseInt(v.Labels[numberLabel], 10, 32)
		if err != nil {
			return -1
		}
		return n
	}
	newest(func(v *v1alpha1.ModelVersion) bool { return number(v) >= 0 },
		func(a, b *v1alpha1.ModelVersion) bool { return number(a) > number(b) })
	// The guard's last switch (its rollback limit counts from it).
	newest(func(v *v1alpha1.ModelVersion) bool {
		k := promotionKind(v)
		return (k == v1alpha1.PromotionRollback || k == v1alpha1.PromotionFallback) && v.Status.Promotion.StartedTime != nil
	}, func(a, b *v1alpha1.ModelVersion) bool {
		return a.Status.Promotion.StartedTime.After(b.Status.Promotion.StartedTime.Time)
	})

	var out []*v1alpha1.ModelVersion
	for _, v := range vw.versions {
		if keep[v] || !v.Status.Phase.Finished() || v.Spec.Source == v1alpha1.SourceRuleBased ||
			v.DeletionTimestamp != nil || !metav1.IsControlledBy(v, line) {
			continue
		}
		out = append(out, v)
	}
	return out
}

// shelve labels the versions that no longer bear on the line's decisions
// (forHistory) as history, so the manager keeps only their metadata. It
// runs after the pass's writes, on versions the pass did not write: a
// version is labelled once it has settled. The label is the only change.
func (r *Reconciler) shelve(ctx context.Context, p *pass, written map[string]bool) error {
	if r.History == nil {
		return nil
	}
	for _, v := range forHistory(p.line, p.vw) {
		if written[v.Name] {
			continue // labelled by a later pass, once its status is read back
		}
		patch := fmt.Appendf(nil, `{"metadata":{"labels":{%q:%q},"resourceVersion":%q}}`, v1alpha1.HistoryLabel, v.Status.Phase, v.ResourceVersion)
		target := &v1alpha1.ModelVersion{ObjectMeta: metav1.ObjectMeta{Namespace: v.Namespace, Name: v.Name}}
		if err := r.Patch(ctx, target, client.RawPatch(types.MergePatchType, patch)); err != nil {
			if apierrors.IsConflict(err) || apierrors.IsNotFound(err) {
				continue // changed or gone meanwhile: the next pass looks again
			}
			return fmt.Errorf("label ModelVersion %s/%s as history: %w", v.Namespace, v.Name, err)
		}
		log.FromContext(ctx).V(1).Info("version kept as history", "version", v.Name, "phase", v.Status.Phase)
	}
	return nil
}

// recall reads a history version in full and takes it out of history (a
// person asked to serve it again): it joins the pass's versions and the
// manager's main cache. It returns nil when the line has no such history
// version.
func (r *Reconciler) recall(ctx context.Context, p *pass, name string) (*v1alpha1.ModelVersion, error) {
	var found *metav1.PartialObjectMetadata
	for _, h := range p.vw.history {
		if h.Name == name && h.DeletionTimestamp == nil {
			found = h
		}
	}
	if found == nil {
		return nil, nil
	}
	var v v1alpha1.ModelVersion
	key := types.NamespacedName{Namespace: found.Namespace, Name: name}
	if err := r.APIReader.Get(ctx, key, &v); err != nil {
		return nil, client.IgnoreNotFound(fmt.Errorf("read history version %s: %w", key, err))
	}
	if !metav1.IsControlledBy(&v, p.line) {
		return nil, nil
	}
	if _, ok := v.Labels[v1alpha1.HistoryLabel]; ok {
		patch := fmt.Appendf(nil, `{"metadata":{"labels":{%q:null},"resourceVersion":%q}}`, v1alpha1.HistoryLabel, v.ResourceVersion)
		if err := r.Patch(ctx, &v, client.RawPatch(types.MergePatchType, patch)); err != nil {
			return nil, fmt.Errorf("take ModelVersion %s out of history: %w", key, err)
		}
	}
	p.vw.before[v.Name] = *v.Status.DeepCopy()
	p.vw.versions = append(p.vw.versions, &v)
	byAge(p.vw.versions)
	return &v, nil
}
