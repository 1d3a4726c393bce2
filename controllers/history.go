package controllers

import (
	"sort"

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
