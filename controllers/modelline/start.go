package modelline

import (
	"context"
	"fmt"
	"strings"
	"time"

	corev1 "k8s.io/api/core/v1"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/runtime"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/policy"
	"plumbline.dev/plumbline/internal/engine/speccheck"
	"plumbline.dev/plumbline/internal/engine/text"
)

// handleRetrainRequest turns a new plumbline.dev/retrain-request token into a
// version. A request while another version is in flight is queued: its
// version waits in Pending, and the line works through versions oldest
// first.
func (r *Reconciler) handleRetrainRequest(ctx context.Context, p *pass) error {
	line, vw := p.line, p.vw
	token, ok := line.Annotations[v1alpha1.RetrainRequestAnnotation]
	if !ok || token == line.Status.LastRetrainRequest {
		return nil
	}
	if len(token) == 0 || len(token) > 253 {
		line.Status.LastRetrainRequest = text.Truncate(token, 253)
		p.eventFor("Request/"+text.Truncate(token, 100), line, nil, corev1.EventTypeWarning, "RetrainRequestInvalid", "annotation %s must hold a token of 1 to 253 characters (a timestamp works); this one has %d", v1alpha1.RetrainRequestAnnotation, len(token))
		return nil
	}
	// A version already made for this token (a pass that crashed before
	// recording it) is the request's version.
	for _, v := range vw.versions {
		if v.Annotations[v1alpha1.RetrainRequestAnnotation] == token {
			line.Status.LastRetrainRequest = token
			return nil
		}
	}
	if line.Spec.Training == nil {
		line.Status.LastRetrainRequest = token
		p.eventFor("Request/"+text.Truncate(token, 100), line, nil, corev1.EventTypeWarning, "RetrainRequestInvalid", "retrain request %q: the line has no spec.training", token)
		return nil
	}
	settled, _, err := r.tryStart(ctx, line, vw, p, pathManual, v1alpha1.ReasonManual, map[string]string{v1alpha1.RetrainRequestAnnotation: token})
	if err != nil || !settled {
		// Not settled: the checks could not be judged; the token waits.
		return err
	}
	line.Status.LastRetrainRequest = token
	return nil
}

// StartVersion is the one way a retrain starts, whatever asked for it (a
// person's request, the schedule, a trigger): it creates the line's next
// Trained version with the reason, which then waits its turn. The name comes
// from the version number, so a pass that crashed after creating it finds
// it again instead of making a second.
func (r *Reconciler) StartVersion(ctx context.Context, line *v1alpha1.ModelLine, vw *view, p *pass, reason string, marks map[string]string) (*v1alpha1.ModelVersion, error) {
	n := nextNumber(line, vw)
	name := versionName(line.Name, n)
	uri, err := speccheck.RenderArtifactURI(line.Spec.Training.ArtifactURI, speccheck.ArtifactData{Line: line.Name, Version: name, Number: n})
	if err != nil {
		return nil, err
	}
	v := &v1alpha1.ModelVersion{
		ObjectMeta: metav1.ObjectMeta{
			Name:      name,
			Namespace: line.Namespace,
			Labels:    map[string]string{v1alpha1.LineLabel: labelValue(line.Name), numberLabel: fmt.Sprint(n)},
			OwnerReferences: []metav1.OwnerReference{*metav1.NewControllerRef(line,
				v1alpha1.GroupVersion.WithKind("ModelLine"))},
		},
		Spec: v1alpha1.ModelVersionSpec{Line: line.Name, Source: v1alpha1.SourceTrained, ArtifactURI: uri, Cause: reason},
	}
	// The marks (a person's token, a scheduled start) say what the version
	// answers, so a pass that crashed before recording it knows it was done.
	if len(marks) > 0 {
		v.Annotations = merge(marks, nil)
	}
	if err := r.Create(ctx, v); err != nil {
		if !apierrors.IsAlreadyExists(err) {
			return nil, fmt.Errorf("create version %s: %w", name, err)
		}
		if err := r.APIReader.Get(ctx, client.ObjectKeyFromObject(v), v); err != nil {
			return nil, fmt.Errorf("read version %s: %w", name, err)
		}
	} else {
		if p.created == nil {
			p.created = map[string]bool{}
		}
		p.created[v.Name] = true
		p.event(v, line, corev1.EventTypeNormal, "Created", "version %d of %s, reason %s, artifact %s", n, line.Name, reason, uri)
	}
	if v.Spec.Line != line.Name {
		return nil, fmt.Errorf("version name %s is taken by a version of line %q", name, v.Spec.Line)
	}
	line.Status.VersionCount = max(line.Status.VersionCount, n)
	if v.Status.Number == 0 {
		v.Status.Number = n // written with the version's first status
	}
	if vw.version(v.Name) == nil {
		vw.versions = append(vw.versions, v)
	}
	return v, nil
}

// nextNumber is one more than the highest number the line has used.
func nextNumber(line *v1alpha1.ModelLine, vw *view) int32 {
	n := line.Status.VersionCount
	for _, v := range vw.versions {
		var k int32
		if _, err := fmt.Sscan(v.Labels[numberLabel], &k); err == nil && k > n {
			n = k
		}
	}
	return n + 1
}

// The paths by which a retrain is asked for, and the outcomes of the
// decision whether to start one: the rules live in internal/policy, shared
// with plumbline backtest.
const (
	pathManual   = policy.PathManual
	pathSchedule = policy.PathSchedule
	pathTrigger  = policy.PathTrigger
	pathEarly    = policy.PathEarlyWarning

	outcomeStarted       = policy.Started
	outcomeDataQuality   = policy.DataQualityIssue
	outcomeNoDrift       = policy.DegradedWithoutDrift
	outcomeInsufficient  = policy.InsufficientData
	outcomeChecksUnknown = policy.ChecksUnknown
	outcomeInFlight      = policy.InFlight
	outcomeCooldown      = policy.Cooldown
)

// scheduledForAnnotation on a version names the scheduled start it answers.
const scheduledForAnnotation = "plumbline.dev/scheduled-for"

// checkRetry is how soon a start whose checks could not be judged (Prometheus
// unreachable, no data) is tried again.
const checkRetry = 30 * time.Second

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

// startJudgements is what a start decision says of the line's Blocked and
// NeedsReview conditions.
func startJudgements(line *v1alpha1.ModelLine, reason string, v policy.Verdict) []judgement {
	msg := fmt.Sprintf("retrain for %s: %s", reason, v.Message)
	blocked := func(status metav1.ConditionStatus, why, msg string, ev *event) judgement {
		return judgement{cond: v1alpha1.ConditionBlocked, status: status, reason: why, message: msg, sticky: true, event: ev}
	}
	review := func(status metav1.ConditionStatus, why string, ev *event) judgement {
		return judgement{cond: v1alpha1.ConditionNeedsReview, status: status, reason: why, message: msg, sticky: true, event: ev}
	}
	switch v.Outcome {
	case outcomeStarted:
		return []judgement{blocked(metav1.ConditionFalse, "ChecksPassed", msg, nil), review(metav1.ConditionFalse, "Retraining", nil)}
	case outcomeDataQuality:
		return []judgement{blocked(metav1.ConditionTrue, outcomeDataQuality, msg,
			lineEvent(line, nil, reason, corev1.EventTypeWarning, "RetrainBlocked", msg))}
	case outcomeChecksUnknown:
		return []judgement{blocked(metav1.ConditionUnknown, outcomeChecksUnknown, msg+"; the start waits until the checks can be judged",
			lineEvent(line, nil, reason, corev1.EventTypeWarning, outcomeChecksUnknown, msg))}
	case outcomeNoDrift, outcomeInsufficient:
		return []judgement{dataQualityOK(),
			review(metav1.ConditionTrue, v.Outcome, lineEvent(line, nil, reason, corev1.EventTypeWarning, "NeedsReview", v.Outcome+": "+msg))}
	}
	return nil
}

// dataQualityOK is the Blocked judgement of checks whose data quality
// passed, whatever else they found.
func dataQualityOK() judgement {
	return judgement{cond: v1alpha1.ConditionBlocked, status: metav1.ConditionFalse, reason: "DataQualityOK", message: "the data-quality checks passed", sticky: true}
}

// tryStart is the path every retrain takes: the checks, then the start. It
// reports whether the request was settled (started or refused); false means
// the checks could not be judged and the caller should try again later.
func (r *Reconciler) tryStart(ctx context.Context, line *v1alpha1.ModelLine, vw *view, p *pass, path, reason string, marks map[string]string) (bool, *v1alpha1.ModelVersion, error) {
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
			p.judge(judgement{cond: v1alpha1.ConditionBlocked, status: metav1.ConditionUnknown, reason: reasonCheckRunning, message: msg, sticky: true})
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
	if v.Outcome == outcomeInsufficient && path != pathEarly {
		// Retraining cannot help; an older or rule-based version might.
		// (Not for drifting inputs alone: no drop in quality is known.)
		started, err := r.startAlternatives(ctx, line, vw, p, altInsufficientData)
		if err != nil {
			return false, nil, err
		}
		if started {
			p.judge(dataQualityOK())
			return true, nil, nil
		}
	}
	p.judge(startJudgements(line, reason, v)...)
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
func (r *Reconciler) handleSchedule(ctx context.Context, p *pass) error {
	line, vw := p.line, p.vw
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
func (r *Reconciler) handleTriggers(ctx context.Context, p *pass) error {
	line, vw, firing := p.line, p.vw, p.firing
	if len(firing) == 0 {
		// A check Job run for a trigger that is still Firing answers as
		// soon as it finishes, not at the trigger's next evaluation.
		if tr := awaitedTrigger(line); tr != nil {
			firing = []v1alpha1.TriggerSpec{*tr}
		}
	}
	fs := make([]policy.Firing, 0, len(firing))
	for _, tr := range firing {
		// The live version has served a whole window once its last
		// predictions have their labels too.
		w := r.window(line, tr.ForSeconds, tr.EverySeconds, tr.LabelDelaySeconds)
		fs = append(fs, policy.Firing{Name: tr.Name, Window: w.Reach()})
	}
	var liveSince *time.Time
	if t := line.Status.LastPromotionTime; t != nil {
		liveSince = &t.Time
	}
	step, ok := policy.StepTriggers(fs, vw.active() != nil, lastRetrain(line), policy.CooldownOf(line.Spec.CooldownSeconds), liveSince, p.now.Time)
	if !ok {
		if j := quietJudgement(line); j != nil {
			p.judge(*j)
		}
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

// handleEarlyWarning takes the early warning's step of the start sequence
// when the line lets drifting inputs ask for a retrain
// (spec.checks.earlyWarning.retrain): while InputsDrifted is True, and no
// trigger asks in this pass, a retrain starts through the usual checks,
// one version at a time and not within the cooldown.
func (r *Reconciler) handleEarlyWarning(ctx context.Context, p *pass) error {
	line, vw := p.line, p.vw
	c := line.Spec.Checks
	if c == nil || c.EarlyWarning == nil || !c.EarlyWarning.Retrain || len(p.firing) > 0 || awaitedTrigger(line) != nil {
		return nil
	}
	if !isTrue(p.condition(v1alpha1.ConditionInputsDrifted)) {
		return nil
	}
	// No live-version wait: drifting inputs say nothing of the live
	// version's quality.
	if outcome, may := policy.TriggerMayStart(vw.active() != nil, lastRetrain(line), policy.CooldownOf(line.Spec.CooldownSeconds), nil, 0, p.now.Time); !may {
		p.count(func() { retrainDecisions.WithLabelValues(line.Namespace, line.Name, pathEarly, outcome).Inc() })
		return nil
	}
	_, _, err := r.tryStart(ctx, line, vw, p, pathEarly, v1alpha1.ReasonEarlyWarning, nil)
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

// quietJudgement withdraws a review the triggers asked for once every
// trigger is Inactive again: the drop that raised it is over. nil while a
// trigger is not Inactive.
func quietJudgement(line *v1alpha1.ModelLine) *judgement {
	if len(line.Status.Triggers) == 0 {
		return nil
	}
	for _, t := range line.Status.Triggers {
		if t.State != v1alpha1.TriggerInactive {
			return nil
		}
	}
	return &judgement{cond: v1alpha1.ConditionNeedsReview, status: metav1.ConditionFalse, reason: "Recovered", message: "every trigger is Inactive again",
		onlyWhile: []string{outcomeNoDrift, outcomeInsufficient}}
}
