package modelline

import (
	"fmt"
	"slices"
	"time"

	appsv1 "k8s.io/api/apps/v1"
	batchv1 "k8s.io/api/batch/v1"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/runtime"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/text"
	"plumbline.dev/plumbline/internal/engine/trigger"
)

// view is what one pass knows about a line besides the line itself. The
// versions are working copies; the pass changes their status in memory and
// writes each changed one once at the end.
type view struct {
	deployment *appsv1.Deployment       // the cache's own copy: read it, change a copy
	versions   []*v1alpha1.ModelVersion // this line's, oldest first
	jobs       map[string]*batchv1.Job  // this line's Jobs, by name
	// history is the metadata of the line's history versions (labelled
	// v1alpha1.HistoryLabel), which the pass does not work on: copies.
	history []*metav1.PartialObjectMetadata
	// before is each version's status as read, before the pass changed
	// it: the cache's own (shared, never changed) copy.
	before map[string]v1alpha1.ModelVersionStatus
}

// workingCopy is the version a pass works on, made from the cache's own
// copy without deep-copying it. It is a copy of the object's struct, so a
// pass may assign any field (v.Status.Phase = ..., v.Status.Gate = &res);
// its conditions are its own, as setCondition changes them in place. Its
// maps, other lists and pointed-to values are the cache's: replace them,
// never change them in place, and give a client call that decodes its
// answer into an object (Patch, Update) a deep copy (writeVersions and
// nameArtifact do).
func workingCopy(shared *v1alpha1.ModelVersion) *v1alpha1.ModelVersion {
	v := *shared
	v.Status.Conditions = slices.Clone(shared.Status.Conditions)
	return &v
}

func (v *view) version(name string) *v1alpha1.ModelVersion {
	for _, x := range v.versions {
		if x.Name == name {
			return x
		}
	}
	return nil
}

// live is the version the line serves: the Live one promoted last.
func (v *view) live() *v1alpha1.ModelVersion {
	var best *v1alpha1.ModelVersion
	for _, x := range v.versions {
		if x.Status.Phase != v1alpha1.PhaseLive {
			continue
		}
		if best == nil || promotedAfter(x, best) {
			best = x
		}
	}
	return best
}

func promotedAfter(a, b *v1alpha1.ModelVersion) bool {
	if sa, sb := promotionSequence(a), promotionSequence(b); sa != sb {
		return sa > sb
	}
	at, bt := a.Status.PromotedTime, b.Status.PromotedTime
	switch {
	case at == nil:
		return false
	case bt == nil:
		return true
	case !at.Equal(bt):
		return bt.Before(at)
	}
	return a.Name > b.Name
}

func promotionSequence(v *v1alpha1.ModelVersion) int64 {
	if v.Status.Promotion == nil {
		return 0
	}
	return v.Status.Promotion.Sequence
}

// nextSequence is one more than the highest promotion sequence of the line.
func (v *view) nextSequence() int64 {
	var n int64
	for _, x := range v.versions {
		n = max(n, promotionSequence(x))
	}
	return n + 1
}

// active is the one version the line works on: the oldest in flight.
// Others wait their turn in Pending.
func (v *view) active() *v1alpha1.ModelVersion {
	for _, x := range v.versions {
		if x.DeletionTimestamp != nil || !x.Status.Phase.InFlight() {
			continue
		}
		// A rule-based version is never trained or judged; it is in flight
		// only while the line switches to it.
		if x.Spec.Source == v1alpha1.SourceRuleBased && x.Status.Phase != v1alpha1.PhasePromoting {
			continue
		}
		return x
	}
	return nil
}

// promoting is the version being rolled out, if any.
func (v *view) promoting() *v1alpha1.ModelVersion {
	for _, x := range v.versions {
		if x.DeletionTimestamp == nil && x.Status.Phase == v1alpha1.PhasePromoting {
			return x
		}
	}
	return nil
}

// pass is what one pass over a line saw and did: the line and its view
// (read once at the start), what each phase found for the phases after it,
// and what to report once the statuses are written (events, counts, when
// to come back).
type pass struct {
	now  metav1.Time
	line *v1alpha1.ModelLine
	vw   *view

	// firing are the triggers found Firing in this pass, in spec order.
	firing []v1alpha1.TriggerSpec
	// guarded is the guard's result on the live version, when it was
	// judged in this pass.
	guarded *trigger.Result
	// guardReason, when set, is the reason of a guard that waits
	// (reasonGuardAwaitingLabels instead of reasonGuardWatching).
	guardReason string
	// stepped is the version the pass took a step.
	stepped *v1alpha1.ModelVersion
	// judgements are what the phases found for Degraded, Blocked and
	// NeedsReview, in order; judgeConditions applies them after the last
	// phase.
	judgements []judgement

	events []event
	// metrics are counts to make once the pass's writes are done; a count
	// bound to a version is made when that version's status was written,
	// the rest when the line's was.
	metrics []count
	// wake is the earliest moment, by the controller's clock, when time
	// alone will change something (a trigger due, a scheduled start).
	wake time.Time
	// evaluated are the triggers evaluated in this pass.
	evaluated []string
	// created are the versions this pass created.
	created map[string]bool
	// rolloutDecided are the versions this pass moved to Promoting: their
	// rollout is patched into the Deployment only by a later pass, once
	// the decision and what it replaces are written.
	rolloutDecided map[string]bool
}

type count struct {
	version string
	inc     func()
}

// judge records judgements for the line's conditions.
func (p *pass) judge(js ...judgement) { p.judgements = append(p.judgements, js...) }

// condition is one of the line's conditions as the judgements so far leave
// it, for a phase that acts on what an earlier one judged.
func (p *pass) condition(typ string) *metav1.Condition {
	conds := slices.Clone(p.line.Status.Conditions)
	judgeConditions(&conds, p.judgements, p.line.Generation, p.now)
	return meta.FindStatusCondition(conds, typ)
}

// count adds a line-level count.
func (p *pass) count(inc func()) { p.metrics = append(p.metrics, count{inc: inc}) }

// countFor adds a count of something that happened to a version.
func (p *pass) countFor(version string, inc func()) {
	p.metrics = append(p.metrics, count{version: version, inc: inc})
}

// wakeAt asks for a pass at t, unless an earlier one is asked for.
func (p *pass) wakeAt(t time.Time) {
	if p.wake.IsZero() || t.Before(p.wake) {
		p.wake = t
	}
}

type event struct {
	regarding, related    runtime.Object
	kind, reason, message string
	// action tells apart events of the same reason about the same object
	// (two triggers changing state at once): events.k8s.io folds events
	// with the same reason, action and objects into one series and keeps
	// the first note.
	action string
}

func (p *pass) event(regarding, related runtime.Object, kind, reason, format string, args ...any) {
	p.events = append(p.events, event{regarding, related, kind, reason, fmt.Sprintf(format, args...), "Reconcile"})
}

// eventFor is event with an action naming what it is about.
func (p *pass) eventFor(action string, regarding, related runtime.Object, kind, reason, format string, args ...any) {
	p.events = append(p.events, event{regarding, related, kind, reason, fmt.Sprintf(format, args...), action})
}

// setPhase moves a version to a phase with a reason and a message.
func (p *pass) setPhase(v *v1alpha1.ModelVersion, phase v1alpha1.VersionPhase, reason, message string) {
	v.Status.Phase, v.Status.Reason, v.Status.Message = phase, reason, text.Truncate(message, 2000)
}
