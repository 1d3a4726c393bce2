package modelline

import (
	"context"
	"errors"
	"fmt"
	"hash/fnv"
	"math"
	"sync"
	"time"

	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/types"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/policy"
	"plumbline.dev/plumbline/internal/engine/promq"
	"plumbline.dev/plumbline/internal/engine/speccheck"
	"plumbline.dev/plumbline/internal/engine/text"
	"plumbline.dev/plumbline/internal/engine/trigger"
)

// guardKey prefixes the guard's entry in the evaluation memory; trigger
// names cannot hold a colon, so the two never meet.
const guardKey = "guard:"

// evaluateGuard judges the guard on the live version when it is due, and
// leaves the result in p.guarded (nil when it was not judged in this pass). The window
// only counts once it lies wholly after the promotion: before that the guard
// watches and does not judge.
func (r *Reconciler) evaluateGuard(ctx context.Context, p *pass) error {
	line, vw := p.line, p.vw
	g := line.Spec.Guard
	live := vw.live()
	if g == nil || live == nil || live.Status.PromotedTime == nil {
		line.Status.Guard = nil
		return nil
	}
	key := types.NamespacedName{Namespace: line.Namespace, Name: line.Name}
	now := p.now.Time
	w := r.window(line, g.ForSeconds, g.EverySeconds, g.LabelDelaySeconds)
	name := guardKey + live.Name
	due, next := r.evals.due(key, line.Generation, name, w.Every, now, !r.Unspread)
	if !due {
		p.wakeAt(next)
		return nil
	}
	promoted := live.Status.PromotedTime.Time
	data := speccheck.QueryData{Line: line.Name, Namespace: line.Namespace, Version: live.Name}
	var res trigger.Result
	if firstFull := w.Matured(promoted); now.Before(firstFull) {
		res, p.guardReason = guardWaits(live.Name, g.Query, w, promoted, firstFull)
		p.wakeAt(firstFull)
	} else {
		series, end, err := r.windowSeries(ctx, g.Query, data, w, w.End(now))
		if err != nil {
			res = trigger.Unknown(fmt.Errorf("query failed: %w", err))
		} else {
			res = trigger.Judge(series, threshold(g.Below, g.Above), w, end)
			res = r.enoughLabels(ctx, g.EnoughLabels, data, w, end, res)
		}
		if !errors.Is(err, promq.ErrNotConfigured) {
			p.wakeAt(next)
		}
	}
	p.evaluated = append(p.evaluated, name)
	if r.LineMetrics == LineMetricsAll {
		recordGuard(line, res)
	}
	prev := line.Status.Guard
	if prev != nil && prev.Name != live.Name {
		prev = nil // a new live version: a new watch
	}
	st := nextTriggerStatus(prev, live.Name, res, p.now)
	if prev == nil || prev.State != st.State {
		if !(prev == nil && st.State == v1alpha1.TriggerInactive) {
			p.eventFor("Guard/"+live.Name, line, live, triggerEventType(st.State), "Guard"+string(st.State), "guard on %s is %s: %s", live.Name, st.State, st.Message)
		}
	}
	line.Status.Guard = &st
	p.guarded = &res
	return nil
}

// guardWaits is the guard's result before its first window that judges
// only the predictions of the version it guards, promoted at promoted:
// Inactive, with no value, saying until when. Under a label delay a guard
// query that does not name {{.Version}} would judge the replaced version's
// predictions, whose labels are the ones coming in: it says so.
func guardWaits(version, query string, w trigger.Window, promoted, firstFull time.Time) (res trigger.Result, reason string) {
	res = trigger.Result{State: v1alpha1.TriggerInactive, Value: math.NaN(),
		Message: fmt.Sprintf("watching %s since its promotion at %s; the first full %s window ends at %s", version, promoted.UTC().Format(time.RFC3339), w.For, firstFull.UTC().Format(time.RFC3339))}
	if w.Delay > 0 {
		at, first := promoted.UTC().Format(time.RFC3339), firstFull.UTC().Format(time.RFC3339)
		if speccheck.UsesVersion(query) {
			res.Message = fmt.Sprintf("waiting for %s's own labelled predictions (label delay %s; promoted at %s): the guard judges its own series ({{.Version}}) from %s, when a whole %s window of them has its labels",
				version, w.Delay, at, first, w.For)
		} else {
			reason = reasonGuardAwaitingLabels
			res.Message = fmt.Sprintf("waiting for %s's own labelled predictions (label delay %s; promoted at %s): the guard query does not name the version, and until %s its window holds predictions of the version before, whose labels are the ones coming in; it judges from %s, when a whole %s window of %s's predictions has its labels",
				version, w.Delay, at, first, first, w.For, version)
		}
	}
	return res, reason
}

type (
	check        = policy.Check
	checkResults = policy.Checks
)

// evaluations remembers when each trigger of each line was last evaluated,
// so a pass that comes early (a Job or a Deployment changed) does not query
// Prometheus again: each trigger is queried once per everySeconds. A new
// generation of the line (an edited trigger) is evaluated at once. After a
// restart every trigger is evaluated once at start-up; its window is in
// Prometheus, so nothing is lost.
type evaluations struct {
	mu    sync.Mutex
	lines map[types.NamespacedName]*lineEvals
}

type lineEvals struct {
	generation int64
	at         map[string]time.Time
}

func (e *evaluations) get(key types.NamespacedName, generation int64) *lineEvals {
	if e.lines == nil {
		e.lines = map[types.NamespacedName]*lineEvals{}
	}
	le := e.lines[key]
	if le == nil || le.generation != generation {
		le = &lineEvals{generation: generation, at: map[string]time.Time{}}
		e.lines[key] = le
	}
	return le
}

// due reports whether a trigger is due at now, and when it next will be.
// Spread, a line's evaluations after its first fall on its own slots
// (slotOffset), at least half an interval apart; else every interval after
// the last.
func (e *evaluations) due(key types.NamespacedName, generation int64, name string, every time.Duration, now time.Time, spread bool) (bool, time.Time) {
	e.mu.Lock()
	defer e.mu.Unlock()
	after := func(t time.Time) time.Time {
		if !spread {
			return t.Add(every)
		}
		return nextSlot(t.Add(every/2), every, slotOffset(key, every))
	}
	last, ok := e.get(key, generation).at[name]
	if !ok || !now.Before(after(last)) {
		return true, after(now)
	}
	return false, after(last)
}

// slotOffset is a line's stable place in every interval: a fleet's lines
// come due spread evenly over the interval instead of together (after a
// start, or after an outage of Prometheus), and all of one line's triggers
// with the same interval come due together, in one pass.
func slotOffset(key types.NamespacedName, every time.Duration) time.Duration {
	if every <= 0 {
		return 0
	}
	h := fnv.New64a()
	h.Write([]byte(key.Namespace))
	h.Write([]byte{0})
	h.Write([]byte(key.Name))
	return time.Duration(h.Sum64() % uint64(every))
}

// nextSlot is the first of the times offset + k*every at or after t.
func nextSlot(t time.Time, every, offset time.Duration) time.Time {
	s := t.Add(-offset).Truncate(every).Add(offset)
	if s.Before(t) {
		s = s.Add(every)
	}
	return s
}

// done records evaluations made at now. It is called once the pass that made
// them has written its status: an evaluation whose result was lost (a write
// that raced another change) is made again by the pass that follows.
func (e *evaluations) done(key types.NamespacedName, generation int64, names []string, now time.Time) {
	e.mu.Lock()
	defer e.mu.Unlock()
	le := e.get(key, generation)
	for _, n := range names {
		le.at[n] = now
	}
}

func (e *evaluations) forget(key types.NamespacedName) {
	e.mu.Lock()
	defer e.mu.Unlock()
	delete(e.lines, key)
}

// window is a trigger's or the guard's window on a line: how long, how
// often, and when its predictions' labels are in.
func (r *Reconciler) window(line *v1alpha1.ModelLine, forSeconds, everySeconds int32, labelDelay *int32) trigger.Window {
	every := seconds(everySeconds)
	if every <= 0 {
		every = time.Minute
	}
	return trigger.Window{For: seconds(forSeconds), Every: every, Coverage: r.Coverage,
		Delay: line.Spec.LabelDelay(labelDelay), Scored: line.Spec.LabelsScored()}
}

// enoughLabels makes a judgement Unknown when the window held fewer
// labelled predictions than need asks, or their number cannot be told: a
// window without its labels says nothing about quality, good or bad. The
// count is need's instant query at the window's end, summed over the series
// it returns.
func (r *Reconciler) enoughLabels(ctx context.Context, need *v1alpha1.LabelCount, d speccheck.QueryData, w trigger.Window, end time.Time, res trigger.Result) trigger.Result {
	if need == nil || res.State == v1alpha1.TriggerUnknown {
		return res
	}
	unknown := func(format string, args ...any) trigger.Result {
		msg := fmt.Sprintf(format, args...)
		if w.Delay > 0 {
			msg = w.PeriodText(end) + ": " + msg
		}
		return trigger.Result{State: v1alpha1.TriggerUnknown, Value: res.Value, Series: res.Series, Message: msg}
	}
	q, err := speccheck.RenderQuery(need.Query, d)
	var series []promq.Series
	if err == nil {
		series, err = r.Prometheus.Instant(ctx, q, end)
	}
	if err != nil {
		return unknown("cannot count the window's labelled predictions (enoughLabels.query): %v", err)
	}
	n, any := 0.0, false
	for _, s := range series {
		if len(s.Points) > 0 && !math.IsNaN(s.Points[0].V) {
			n += s.Points[0].V
			any = true
		}
	}
	if !any {
		return unknown("enoughLabels.query returned no count of labelled predictions; not judged")
	}
	if n < need.AtLeast {
		return unknown("only %s labelled predictions in the window, %s needed (enoughLabels.atLeast); not judged until more labels are in", promq.Format(n), promq.Format(need.AtLeast))
	}
	return res
}

func threshold(below, above *float64) trigger.Threshold {
	return trigger.Threshold{Below: below, Above: above}
}

func seconds(n int32) time.Duration { return time.Duration(n) * time.Second }

// evaluateTriggers runs each due trigger's range query and updates its
// status. The status changes only when a trigger's state does; the value
// seen each time goes to metrics. It leaves the triggers found Firing in
// this pass in p.firing, in spec order.
func (r *Reconciler) evaluateTriggers(ctx context.Context, p *pass) error {
	line := p.line
	key := types.NamespacedName{Namespace: line.Namespace, Name: line.Name}
	now := p.now.Time
	var firing []v1alpha1.TriggerSpec
	var statuses []v1alpha1.TriggerStatus
	for _, tr := range line.Spec.Triggers {
		prev := findTrigger(line.Status.Triggers, tr.Name)
		w := r.window(line, tr.ForSeconds, tr.EverySeconds, tr.LabelDelaySeconds)
		due, next := r.evals.due(key, line.Generation, tr.Name, w.Every, now, !r.Unspread)
		if !due {
			p.wakeAt(next)
			if prev != nil {
				statuses = append(statuses, *prev)
			}
			continue
		}
		data := queryData(line)
		series, end, err := r.windowSeries(ctx, tr.Query, data, w, w.End(now))
		var res trigger.Result
		if err != nil {
			res = trigger.Unknown(fmt.Errorf("query failed: %w", err))
		} else {
			res = trigger.Judge(series, threshold(tr.Below, tr.Above), w, end)
			res = r.enoughLabels(ctx, tr.EnoughLabels, data, w, end, res)
		}
		p.evaluated = append(p.evaluated, tr.Name)
		if !errors.Is(err, promq.ErrNotConfigured) {
			// With no Prometheus at all nothing will change with time.
			p.wakeAt(next)
		}
		if r.LineMetrics == LineMetricsAll {
			recordTrigger(line, tr.Name, res)
		}
		st := nextTriggerStatus(prev, tr.Name, res, p.now)
		statuses = append(statuses, st)
		// A change of state is news; a first judgement is only when it
		// finds something (a fleet's fresh start would otherwise say
		// "Inactive" once per trigger).
		if (prev == nil && st.State != v1alpha1.TriggerInactive) || (prev != nil && prev.State != st.State) {
			p.eventFor("Trigger/"+tr.Name, line, nil, triggerEventType(st.State), "Trigger"+string(st.State), "trigger %s is %s: %s", tr.Name, st.State, st.Message)
		}
		if res.State == v1alpha1.TriggerFiring {
			firing = append(firing, tr)
		}
	}
	forgetRemovedTriggers(line, statuses)
	line.Status.Triggers = statuses
	p.firing = firing
	return nil
}

func findTrigger(sts []v1alpha1.TriggerStatus, name string) *v1alpha1.TriggerStatus {
	for i := range sts {
		if sts[i].Name == name {
			return &sts[i]
		}
	}
	return nil
}

// nextTriggerStatus is a trigger's status after an evaluation: unchanged
// while the state holds (so an evaluation that finds nothing new writes
// nothing), and on a change the state, when it began, and the value, series
// and message that decided it.
func nextTriggerStatus(prev *v1alpha1.TriggerStatus, name string, res trigger.Result, now metav1.Time) v1alpha1.TriggerStatus {
	if prev != nil && prev.State == res.State {
		return *prev
	}
	since := now
	if (res.State == v1alpha1.TriggerPending || res.State == v1alpha1.TriggerFiring) && !res.Since.IsZero() {
		since = metav1.NewTime(res.Since)
	}
	return v1alpha1.TriggerStatus{
		Name:    name,
		State:   res.State,
		Since:   &since,
		Value:   promq.Format(res.Value),
		Series:  text.Truncate(res.Series, 1024),
		Message: text.Truncate(res.Message, 1024),
	}
}

func triggerEventType(s v1alpha1.TriggerState) string {
	if s == v1alpha1.TriggerFiring || s == v1alpha1.TriggerUnknown {
		return corev1.EventTypeWarning
	}
	return corev1.EventTypeNormal
}

// runCheck asks one instant query and judges it against a threshold: any
// series breaching breaches; no series at all cannot be judged.
func (r *Reconciler) runCheck(ctx context.Context, line *v1alpha1.ModelLine, kind, name, query string, th trigger.Threshold, now time.Time) check {
	c := check{Kind: kind, Name: name}
	query, err := speccheck.RenderQuery(query, queryData(line))
	var series []promq.Series
	if err == nil {
		series, err = r.Prometheus.Instant(ctx, query, now)
	}
	if err != nil {
		c.Err = err.Error()
		return c
	}
	var first *promq.Series
	for i := range series {
		s := &series[i]
		if len(s.Points) == 0 || math.IsNaN(s.Points[0].V) {
			continue
		}
		if first == nil {
			first = s
		}
		if th.Breached(s.Points[0].V) {
			c.Known, c.Breached, c.Value, c.Series = true, true, s.Points[0].V, s.Labels
			return c
		}
	}
	if first == nil {
		c.Err = "the query returned no value"
		return c
	}
	c.Known, c.Value, c.Series = true, first.Points[0].V, first.Labels
	return c
}

// queryData is what a line's trigger and check queries render with: the
// line and its live version.
func queryData(line *v1alpha1.ModelLine) speccheck.QueryData {
	return speccheck.QueryData{Line: line.Name, Namespace: line.Namespace, Version: line.Status.LiveVersion}
}

// runChecks runs the checks a path needs: data quality always, drift only
// for a trigger, fresh data always. Each is one instant query.
func (r *Reconciler) runChecks(ctx context.Context, line *v1alpha1.ModelLine, path string, now time.Time) checkResults {
	var res checkResults
	c := line.Spec.Checks
	if c == nil {
		return res
	}
	for _, q := range c.DataQuality {
		res.DataQuality = append(res.DataQuality, r.runCheck(ctx, line, "data-quality", q.Name, q.Query, threshold(q.Below, q.Above), now))
	}
	if path == pathTrigger {
		for _, q := range c.Drift {
			res.Drift = append(res.Drift, r.runCheck(ctx, line, "drift", q.Name, q.Query, threshold(q.Below, q.Above), now))
		}
	}
	if f := c.FreshData; f != nil && f.Query != "" {
		// The least value across series must reach atLeast.
		th := threshold(&f.AtLeast, nil)
		fc := r.runCheck(ctx, line, "fresh-data", "freshData", f.Query, th, now)
		res.FreshData, res.AtLeast = &fc, f.AtLeast
	}
	return res
}
