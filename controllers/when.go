package controllers

import (
	"context"
	"errors"
	"fmt"
	"math"
	"strings"
	"sync"
	"time"

	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/runtime"
	"k8s.io/apimachinery/pkg/types"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/policy"
	"plumbline.dev/plumbline/internal/engine/promq"
	"plumbline.dev/plumbline/internal/engine/text"
	"plumbline.dev/plumbline/internal/engine/trigger"
)

// The paths by which a retrain is asked for, and the outcomes of the
// decision whether to start one: the rules live in internal/policy, shared
// with plumbline backtest.
const (
	pathManual   = policy.PathManual
	pathSchedule = policy.PathSchedule
	pathTrigger  = policy.PathTrigger

	outcomeStarted       = policy.Started
	outcomeDataQuality   = policy.DataQualityIssue
	outcomeNoDrift       = policy.DegradedWithoutDrift
	outcomeInsufficient  = policy.InsufficientData
	outcomeChecksUnknown = policy.ChecksUnknown
	outcomeInFlight      = policy.InFlight
	outcomeCooldown      = policy.Cooldown
)

type (
	check        = policy.Check
	checkResults = policy.Checks
)

// scheduledForAnnotation on a version names the scheduled start it answers.
const scheduledForAnnotation = "plumbline.dev/scheduled-for"

// checkRetry is how soon a start whose checks could not be judged (Prometheus
// unreachable, no data) is tried again.
const checkRetry = 30 * time.Second

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
func (e *evaluations) due(key types.NamespacedName, generation int64, name string, every time.Duration, now time.Time) (bool, time.Time) {
	e.mu.Lock()
	defer e.mu.Unlock()
	last, ok := e.get(key, generation).at[name]
	if !ok || !now.Before(last.Add(every)) {
		return true, now.Add(every)
	}
	return false, last.Add(every)
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

func threshold(below, above *float64) trigger.Threshold {
	return trigger.Threshold{Below: below, Above: above}
}

func seconds(n int32) time.Duration { return time.Duration(n) * time.Second }

// evaluateTriggers runs each due trigger's range query and updates its
// status. The status changes only when a trigger's state does; the value
// seen each time goes to metrics. It returns the triggers found Firing in
// this pass, in spec order.
func (r *ModelLineReconciler) evaluateTriggers(ctx context.Context, line *v1alpha1.ModelLine, p *pass) []v1alpha1.TriggerSpec {
	key := types.NamespacedName{Namespace: line.Namespace, Name: line.Name}
	now := p.now.Time
	var firing []v1alpha1.TriggerSpec
	var statuses []v1alpha1.TriggerStatus
	for _, tr := range line.Spec.Triggers {
		prev := findTrigger(line.Status.Triggers, tr.Name)
		every := seconds(tr.EverySeconds)
		if every <= 0 {
			every = time.Minute
		}
		due, next := r.evals.due(key, line.Generation, tr.Name, every, now)
		if !due {
			p.wakeAt(next)
			if prev != nil {
				statuses = append(statuses, *prev)
			}
			continue
		}
		w := trigger.Window{For: seconds(tr.ForSeconds), Every: every, Coverage: r.Coverage}
		series, err := r.Prometheus.Range(ctx, tr.Query, now.Add(-w.For), now, w.Step())
		var res trigger.Result
		if err != nil {
			res = trigger.Unknown(fmt.Errorf("query failed: %w", err))
		} else {
			res = trigger.Judge(series, threshold(tr.Below, tr.Above), w, now)
		}
		p.evaluated = append(p.evaluated, tr.Name)
		if !errors.Is(err, promq.ErrNotConfigured) {
			// With no Prometheus at all nothing will change with time.
			p.wakeAt(next)
		}
		recordTrigger(line, tr.Name, res)
		st := nextTriggerStatus(prev, tr.Name, res, p.now)
		statuses = append(statuses, st)
		if prev == nil || prev.State != st.State {
			p.eventFor("Trigger/"+tr.Name, line, nil, triggerEventType(st.State), "Trigger"+string(st.State), "trigger %s is %s: %s", tr.Name, st.State, st.Message)
		}
		if res.State == v1alpha1.TriggerFiring {
			firing = append(firing, tr)
		}
	}
	forgetRemovedTriggers(line, statuses)
	line.Status.Triggers = statuses
	return firing
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
func (r *ModelLineReconciler) runCheck(ctx context.Context, kind, name, query string, th trigger.Threshold, now time.Time) check {
	c := check{Kind: kind, Name: name}
	series, err := r.Prometheus.Instant(ctx, query, now)
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

// runChecks runs the checks a path needs: data quality always, drift only
// for a trigger, fresh data always. Each is one instant query.
func (r *ModelLineReconciler) runChecks(ctx context.Context, line *v1alpha1.ModelLine, path string, now time.Time) checkResults {
	var res checkResults
	c := line.Spec.Checks
	if c == nil {
		return res
	}
	for _, q := range c.DataQuality {
		res.DataQuality = append(res.DataQuality, r.runCheck(ctx, "data-quality", q.Name, q.Query, threshold(q.Below, q.Above), now))
	}
	if path == pathTrigger {
		for _, q := range c.Drift {
			res.Drift = append(res.Drift, r.runCheck(ctx, "drift", q.Name, q.Query, threshold(q.Below, q.Above), now))
		}
	}
	if f := c.FreshData; f != nil && f.Query != "" {
		// The least value across series must reach atLeast.
		th := threshold(&f.AtLeast, nil)
		fc := r.runCheck(ctx, "fresh-data", "freshData", f.Query, th, now)
		res.FreshData, res.AtLeast = &fc, f.AtLeast
	}
	return res
}

// spendsCheck says whether a decision used up the check Job's report, so
// the next request runs the Job again: a start does, a report that could
// not be used does, and so does any answer to a person's request (asking
// again means "look again"). A schedule or trigger refused on the report
// keeps it while it is fresh (checkReportMaxAge), so a trigger that keeps
// firing does not run a Job at every evaluation; nor is a report spent
// while PromQL checks that could not be judged hold the start back.
func spendsCheck(path, outcome string, st *v1alpha1.CheckRunStatus) bool {
	switch {
	case st == nil:
		return false
	case st.DataQuality == v1alpha1.CheckUnknown, outcome == outcomeStarted:
		return true
	case outcome == outcomeChecksUnknown:
		return false
	default:
		return path == pathManual
	}
}

// apply records a decision's outcome on the line's Blocked and NeedsReview
// conditions, with an event when a condition changes.
func applyVerdict(line *v1alpha1.ModelLine, p *pass, reason string, v policy.Verdict) {
	cond := func(typ string, status metav1.ConditionStatus, why, msg string) bool {
		return setConditionSticky(&line.Status.Conditions, metav1.Condition{Type: typ, Status: status, Reason: why, Message: text.Truncate(msg, 2000)}, line.Generation, p.now)
	}
	msg := fmt.Sprintf("retrain for %s: %s", reason, v.Message)
	switch v.Outcome {
	case outcomeStarted:
		cond(v1alpha1.ConditionBlocked, metav1.ConditionFalse, "ChecksPassed", msg)
		cond(v1alpha1.ConditionNeedsReview, metav1.ConditionFalse, "Retraining", msg)
	case outcomeDataQuality:
		if cond(v1alpha1.ConditionBlocked, metav1.ConditionTrue, outcomeDataQuality, msg) {
			p.eventFor(reason, line, nil, corev1.EventTypeWarning, "RetrainBlocked", "%s", msg)
		}
	case outcomeChecksUnknown:
		if cond(v1alpha1.ConditionBlocked, metav1.ConditionUnknown, outcomeChecksUnknown, msg+"; the start waits until the checks can be judged") {
			p.eventFor(reason, line, nil, corev1.EventTypeWarning, outcomeChecksUnknown, "%s", msg)
		}
	case outcomeNoDrift, outcomeInsufficient:
		cond(v1alpha1.ConditionBlocked, metav1.ConditionFalse, "DataQualityOK", "the data-quality checks passed")
		if cond(v1alpha1.ConditionNeedsReview, metav1.ConditionTrue, v.Outcome, msg) {
			p.eventFor(reason, line, nil, corev1.EventTypeWarning, "NeedsReview", "%s: %s", v.Outcome, msg)
		}
	}
}

// tryStart is the path every retrain takes: the checks, then the start. It
// reports whether the request was settled (started or refused); false means
// the checks could not be judged and the caller should try again later.
func (r *ModelLineReconciler) tryStart(ctx context.Context, line *v1alpha1.ModelLine, vw *view, p *pass, path, reason string, marks map[string]string) (bool, *v1alpha1.ModelVersion, error) {
	cr := r.runChecks(ctx, line, path, p.now.Time)
	v := policy.DecideStart(path, cr)
	if c := line.Spec.Checks; c != nil && c.JobTemplate != nil && v.Outcome != outcomeDataQuality {
		// The check Job's answers join the PromQL checks' (which alone
		// may already refuse, and then no Job runs).
		jc, err := r.runCheckJob(ctx, line, vw, p, reason)
		if err != nil {
			return false, nil, err
		}
		if jc.pending {
			msg := fmt.Sprintf("retrain for %s: check Job %s is running; the start waits for its report", reason, line.Status.LastCheck.Job)
			setConditionSticky(&line.Status.Conditions, metav1.Condition{Type: v1alpha1.ConditionBlocked, Status: metav1.ConditionUnknown,
				Reason: reasonCheckRunning, Message: msg}, line.Generation, p.now)
			p.wakeAt(p.now.Add(checkRetry))
			return false, nil, nil
		}
		cr.DataQuality = append(cr.DataQuality, jc.dataQuality)
		cr.Drift = append(cr.Drift, jc.drift)
		if f := c.FreshData; f != nil && f.Query == "" {
			rows := jc.rows
			rows.Breached = rows.Known && rows.Value < f.AtLeast
			cr.FreshData, cr.AtLeast = &rows, f.AtLeast
		}
		v = policy.DecideStart(path, cr)
		if spendsCheck(path, v.Outcome, line.Status.LastCheck) {
			line.Status.LastCheck.Used = true
		}
	}
	p.count(func() { retrainDecisions.WithLabelValues(line.Namespace, line.Name, path, v.Outcome).Inc() })
	if v.Outcome == outcomeInsufficient {
		// Retraining cannot help; an older or rule-based version might.
		started, err := r.startAlternatives(ctx, line, vw, p, altInsufficientData)
		if err != nil {
			return false, nil, err
		}
		if started {
			setConditionSticky(&line.Status.Conditions, metav1.Condition{Type: v1alpha1.ConditionBlocked, Status: metav1.ConditionFalse,
				Reason: "DataQualityOK", Message: "the data-quality checks passed"}, line.Generation, p.now)
			return true, nil, nil
		}
	}
	applyVerdict(line, p, reason, v)
	switch v.Outcome {
	case outcomeChecksUnknown:
		p.wakeAt(p.now.Add(checkRetry))
		return false, nil, nil
	case outcomeStarted:
		version, err := r.StartVersion(ctx, line, vw, p, reason, marks)
		if err != nil {
			return false, nil, err
		}
		queued := ""
		if a := vw.active(); a != nil && a != version {
			queued = fmt.Sprintf("; it waits for %s (%s)", a.Name, a.Status.Phase)
		}
		p.event(line, version, corev1.EventTypeNormal, "RetrainStarted", "%s: created version %s%s", reason, version.Name, queued)
		return true, version, nil
	}
	return true, nil, nil
}

// handleSchedule takes the schedule's step of the start sequence
// (policy.StepSchedule): the way the built-in CronJob does, only the most
// recent missed start, not past the starting deadline, and not while a
// version is in flight.
func (r *ModelLineReconciler) handleSchedule(ctx context.Context, line *v1alpha1.ModelLine, vw *view, p *pass) error {
	s := line.Spec.Schedule
	if s == nil {
		line.Status.NextScheduleTime = nil
		return nil
	}
	if line.Status.LastScheduleTime == nil {
		// Count from when the controller first saw the schedule, by its own
		// clock, as the built-in CronJob counts from its creation.
		line.Status.LastScheduleTime = p.now.DeepCopy()
	}
	step, err := policy.StepSchedule(s, line.Status.LastScheduleTime.Time, p.now.Time, vw.active() != nil)
	if err != nil {
		// The spec checks report this as InvalidSpec; nothing to do here.
		return nil
	}
	next := metav1.NewTime(step.Next)
	line.Status.NextScheduleTime = &next
	p.wakeAt(step.Next)
	at := step.At.Format(time.RFC3339)
	record := func() { line.Status.LastScheduleTime = &metav1.Time{Time: step.At} }
	switch step.Action {
	case policy.ScheduleMissed:
		record()
		p.eventFor("Schedule/"+at, line, nil, corev1.EventTypeWarning, "MissedSchedule", "%s scheduled starts missed, the latest at %s, which is past spec.schedule.startingDeadlineSeconds (%ds); next start %s",
			step.MissedText(), at, *s.StartingDeadlineSeconds, step.Next.Format(time.RFC3339))
		p.count(func() { scheduleMissed.WithLabelValues(line.Namespace, line.Name).Add(float64(step.Missed)) })
		return nil
	case policy.ScheduleSkipped:
		record()
		a := vw.active()
		p.eventFor("Schedule/"+at, line, a, corev1.EventTypeNormal, "ScheduleSkipped", "scheduled start at %s skipped: version %s is in flight (%s)", at, a.Name, a.Status.Phase)
		p.count(func() {
			retrainDecisions.WithLabelValues(line.Namespace, line.Name, pathSchedule, outcomeInFlight).Inc()
		})
		return nil
	case policy.ScheduleStart:
	default:
		return nil
	}
	for _, v := range vw.versions {
		if v.Annotations[scheduledForAnnotation] == at {
			// Started by a pass that did not live to record it.
			record()
			return nil
		}
	}
	settled, started, err := r.tryStart(ctx, line, vw, p, pathSchedule, v1alpha1.ReasonSchedule, map[string]string{scheduledForAnnotation: at})
	if err != nil || !settled {
		return err
	}
	record()
	if step.Missed > 0 {
		// Told about the version it started, when there is one, so the
		// warning goes out even if the line's own write races.
		var about runtime.Object
		name := ""
		if started != nil {
			about, name = started, started.Name
		}
		p.eventFor("Schedule/"+at, line, about, corev1.EventTypeWarning, "MissedSchedule", "%s scheduled starts were missed (the controller was down or the line suspended); ran only the latest, at %s",
			step.MissedText(), at)
		inc := func() { scheduleMissed.WithLabelValues(line.Namespace, line.Name).Add(float64(step.Missed)) }
		if name != "" {
			p.countFor(name, inc)
		} else {
			p.count(inc)
		}
	}
	return nil
}

// handleTriggers takes the triggers' step of the start sequence
// (policy.StepTriggers): the first trigger that fired in this pass starts a
// retrain, unless a version is in flight, the line is cooling down from its
// last retrain, or the live version has not served a whole window yet.
func (r *ModelLineReconciler) handleTriggers(ctx context.Context, line *v1alpha1.ModelLine, vw *view, p *pass, firing []v1alpha1.TriggerSpec) error {
	if len(firing) == 0 {
		// A check Job run for a trigger that is still Firing answers as
		// soon as it finishes, not at the trigger's next evaluation.
		if tr := awaitedTrigger(line); tr != nil {
			firing = []v1alpha1.TriggerSpec{*tr}
		}
	}
	fs := make([]policy.Firing, 0, len(firing))
	for _, tr := range firing {
		fs = append(fs, policy.Firing{Name: tr.Name, Window: seconds(tr.ForSeconds)})
	}
	var liveSince *time.Time
	if t := line.Status.LastPromotionTime; t != nil {
		liveSince = &t.Time
	}
	step, ok := policy.StepTriggers(fs, vw.active() != nil, lastRetrain(line), policy.CooldownOf(line.Spec.CooldownSeconds), liveSince, p.now.Time)
	if !ok {
		clearReviewWhenQuiet(line, p)
		return nil
	}
	if !step.May() {
		p.count(func() {
			retrainDecisions.WithLabelValues(line.Namespace, line.Name, pathTrigger, step.Outcome).Inc()
		})
		if !step.Wake.IsZero() {
			p.wakeAt(step.Wake)
		}
		return nil
	}
	_, _, err := r.tryStart(ctx, line, vw, p, pathTrigger, v1alpha1.ReasonTriggerPrefix+step.Trigger, nil)
	return err
}

// awaitedTrigger is the trigger a pending check run was started for, while
// its status still says Firing.
func awaitedTrigger(line *v1alpha1.ModelLine) *v1alpha1.TriggerSpec {
	st := line.Status.LastCheck
	if st == nil || st.Used || !strings.HasPrefix(st.Reason, v1alpha1.ReasonTriggerPrefix) {
		return nil
	}
	name := strings.TrimPrefix(st.Reason, v1alpha1.ReasonTriggerPrefix)
	if ts := findTrigger(line.Status.Triggers, name); ts == nil || ts.State != v1alpha1.TriggerFiring {
		return nil
	}
	for i := range line.Spec.Triggers {
		if line.Spec.Triggers[i].Name == name {
			return &line.Spec.Triggers[i]
		}
	}
	return nil
}

// lastRetrain is when the line last started a retrain, whatever asked, by
// the controller's clock.
func lastRetrain(line *v1alpha1.ModelLine) *time.Time {
	if t := line.Status.LastRetrainTime; t != nil {
		tt := t.Time
		return &tt
	}
	return nil
}

// clearReviewWhenQuiet withdraws a review the triggers asked for once every
// trigger is Inactive again: the drop that raised it is over.
func clearReviewWhenQuiet(line *v1alpha1.ModelLine, p *pass) {
	if r := conditionReason(line, v1alpha1.ConditionNeedsReview); r != outcomeNoDrift && r != outcomeInsufficient {
		return
	}
	if len(line.Status.Triggers) == 0 {
		return
	}
	for _, t := range line.Status.Triggers {
		if t.State != v1alpha1.TriggerInactive {
			return
		}
	}
	setCondition(&line.Status.Conditions, metav1.Condition{Type: v1alpha1.ConditionNeedsReview, Status: metav1.ConditionFalse,
		Reason: "Recovered", Message: "every trigger is Inactive again"}, line.Generation, p.now)
}
