package modelline

import (
	"slices"
	"sync"

	"k8s.io/apimachinery/pkg/types"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/speccheck"
)

// specChecks keeps each line's spec problems for its generation: the spec
// check parses every PromQL query, template and cron expression, which a
// pass that changed nothing need not do again. A new generation (an edited
// spec) or another object of the same name (UID) is checked anew.
type specChecks struct {
	mu    sync.Mutex
	lines map[types.NamespacedName]specCheck
}

type specCheck struct {
	uid        types.UID
	generation int64
	problems   []speccheck.Problem
}

// problems returns the line's spec problems, a copy the caller may extend.
func (c *specChecks) problems(line *v1alpha1.ModelLine) []speccheck.Problem {
	key := types.NamespacedName{Namespace: line.Namespace, Name: line.Name}
	c.mu.Lock()
	e, ok := c.lines[key]
	c.mu.Unlock()
	if !ok || e.uid != line.UID || e.generation != line.Generation {
		e = specCheck{uid: line.UID, generation: line.Generation, problems: speccheck.Line(&line.Spec)}
		c.mu.Lock()
		if c.lines == nil {
			c.lines = map[types.NamespacedName]specCheck{}
		}
		c.lines[key] = e
		c.mu.Unlock()
	}
	return slices.Clone(e.problems)
}

func (c *specChecks) forget(key types.NamespacedName) {
	c.mu.Lock()
	defer c.mu.Unlock()
	delete(c.lines, key)
}
