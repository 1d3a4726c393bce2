package modelline

import (
	"context"
	"fmt"
	"sort"

	corev1 "k8s.io/api/core/v1"
	"sigs.k8s.io/controller-runtime/pkg/client"

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

// pruneList returns the versions history no longer keeps: finished versions
// (Archived, Rejected, Failed) beyond the newest limit. The live version, the
// previous one and rule-based versions are never pruned, whatever their
// phase.
func pruneList(versions []*v1alpha1.ModelVersion, live, previous string, limit int32) []*v1alpha1.ModelVersion {
	var finished []*v1alpha1.ModelVersion
	for _, v := range versions {
		if !v.Status.Phase.Finished() || v.Name == live || v.Name == previous || v.Spec.Source == v1alpha1.SourceRuleBased {
			continue
		}
		finished = append(finished, v)
	}
	byAge(finished)
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
	for _, v := range pruneList(vw.versions, live, previous, limit) {
		if err := r.Delete(ctx, v, client.Preconditions{UID: &v.UID}); client.IgnoreNotFound(err) != nil {
			return fmt.Errorf("prune version %s: %w", v.Name, err)
		}
		now := p.now
		v.DeletionTimestamp = &now
		p.eventFor("Prune/"+v.Name, line, nil, corev1.EventTypeNormal, "Pruned", "deleted %s version %s: history keeps %d finished versions (spec.historyLimit)", v.Status.Phase, v.Name, limit)
	}
	return nil
}
