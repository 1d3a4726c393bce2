package modelline

import (
	"context"
	"errors"
	"fmt"
	"sort"
	"strings"
	"time"

	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/contract/checkreport"
	"plumbline.dev/plumbline/internal/contract/jobenv"
	"plumbline.dev/plumbline/internal/engine/promq"
	"plumbline.dev/plumbline/internal/engine/text"
)

const (
	roleCheck = "check"
	// checkReportMaxAge is how long a finished check's report answers a
	// request that is still waiting (PromQL checks that could not be
	// judged, say); older, the Job runs again.
	checkReportMaxAge = time.Hour
	// checkJobsKept is how many of a line's check Jobs are kept, newest
	// first, for their logs.
	checkJobsKept = 3

	reasonCheckRunning  = "CheckRunning"
	reasonCheckJobTaken = "CheckJobNameTaken"
	reasonCheckFailed   = "CheckJobFailed"
	reasonCheckDeleted  = "CheckJobDeleted"
)

func checkJobName(line string, n int32) string {
	return childName(line, fmt.Sprintf("check-%d", n), 63)
}

// buildCheckJob renders the line's check Job: owned by the line, told the
// window a retrain would train on (the current batch) and the live
// version's window (the reference batch).
func buildCheckJob(line *v1alpha1.ModelLine, vw *view, n int32, reason string, now time.Time) *batchv1.Job {
	job := renderJob(line.Spec.Checks.JobTemplate, checkJobName(line.Name, n), line, "ModelLine", map[string]string{
		v1alpha1.LineLabel: labelValue(line.Name),
		v1alpha1.RoleLabel: roleCheck,
		numberLabel:        fmt.Sprint(n),
	})
	env := []corev1.EnvVar{
		{Name: jobenv.Line, Value: line.Name},
		{Name: jobenv.Reason, Value: reason},
		{Name: jobenv.DataFrom, Value: formatTime(lastTrainedUntil(vw, nil))},
		{Name: jobenv.DataTo, Value: formatTime(&now)},
	}
	live, refFrom, refTo := "", "", ""
	if v := vw.live(); v != nil {
		live = v.Name
		if v.Status.DataFrom != nil {
			refFrom = formatTime(&v.Status.DataFrom.Time)
		}
		if v.Status.DataTo != nil {
			refTo = formatTime(&v.Status.DataTo.Time)
		}
	}
	env = append(env, corev1.EnvVar{Name: jobenv.LiveVersion, Value: live},
		corev1.EnvVar{Name: jobenv.ReferenceFrom, Value: refFrom}, corev1.EnvVar{Name: jobenv.ReferenceTo, Value: refTo})
	injectEnv(&job.Spec.Template.Spec, env)
	return job
}

// jobChecks are a check Job's answers as checks beside the PromQL ones.
type jobChecks struct {
	pending     bool
	dataQuality check
	drift       check
	rows        check
}

// usableCheck reports whether the line's last check run answers a request:
// still running, or finished recently and not yet taken by a decision. The
// data it checks does not depend on who asked, so a run started for one
// request answers another (reason records the first).
func usableCheck(st *v1alpha1.CheckRunStatus, now time.Time) bool {
	if st == nil || st.Used {
		return false
	}
	return st.FinishedTime == nil || now.Sub(st.FinishedTime.Time) < checkReportMaxAge
}

// runCheckJob runs the line's check Job for a retrain request, or follows
// the one running, and returns its answers once its report is read.
func (r *Reconciler) runCheckJob(ctx context.Context, line *v1alpha1.ModelLine, vw *view, p *pass, reason string) (jobChecks, error) {
	st := line.Status.LastCheck
	if !usableCheck(st, p.now.Time) {
		n := int32(1)
		if st != nil {
			n = st.Number + 1
		}
		st = &v1alpha1.CheckRunStatus{Number: n, Job: checkJobName(line.Name, n), Reason: reason, StartedTime: p.now.DeepCopy()}
		line.Status.LastCheck = st
		want := buildCheckJob(line, vw, n, reason, p.now.Time)
		_, created, err := r.ensureJob(ctx, want, line)
		switch {
		case errors.Is(err, errJobNameTaken):
			r.checkUnusable(line, p, st, reasonCheckJobTaken, fmt.Sprintf("a Job named %s exists and does not belong to this line; delete or rename it", want.Name))
			return answers(st), nil
		case err != nil:
			return jobChecks{}, err
		case created:
			p.eventFor(fmt.Sprintf("Check/%d", n), line, nil, corev1.EventTypeNormal, "CheckStarted", "%s: check Job %s started", reason, want.Name)
		}
		if err := r.pruneCheckJobs(ctx, line, vw, n); err != nil {
			return jobChecks{}, err
		}
		return jobChecks{pending: true}, nil
	}
	if st.FinishedTime == nil {
		job, err := r.jobNamed(ctx, vw, line.Namespace, st.Job)
		if err != nil {
			return jobChecks{}, err
		}
		if job == nil {
			r.checkUnusable(line, p, st, reasonCheckDeleted, fmt.Sprintf("check Job %s was deleted before it finished", st.Job))
			return answers(st), nil
		}
		done, err := r.readCheckJob(ctx, line, job, p, st)
		if err != nil || !done {
			return jobChecks{pending: !done}, err
		}
	}
	return answers(st), nil
}

// checkUnusable records a check run that gave no answer.
func (r *Reconciler) checkUnusable(line *v1alpha1.ModelLine, p *pass, st *v1alpha1.CheckRunStatus, reason, msg string) {
	st.FinishedTime = p.now.DeepCopy()
	st.DataQuality, st.Drift = v1alpha1.CheckUnknown, v1alpha1.CheckUnknown
	st.Message = text.Truncate(reason+": "+msg, 2048)
	countCheck(line, p, st)
	p.eventFor(fmt.Sprintf("Check/%d", st.Number), line, nil, corev1.EventTypeWarning, "CheckUnusable", "%s", st.Message)
}

// readCheckJob reads a finished check Job's report into the run's status.
// A Job that failed, or left no report the parser accepts, answers Unknown:
// the start waits, and the next try runs the Job again.
func (r *Reconciler) readCheckJob(ctx context.Context, line *v1alpha1.ModelLine, job *batchv1.Job, p *pass, st *v1alpha1.CheckRunStatus) (bool, error) {
	out, err := r.readReport(ctx, job, "check")
	if err != nil || !out.done {
		return false, err
	}
	if out.failed != "" {
		r.checkUnusable(line, p, st, reasonCheckFailed, out.failed)
		return true, nil
	}
	if !out.found {
		r.checkUnusable(line, p, st, checkreport.ReasonMissing, fmt.Sprintf("check Job %s completed but none of its Pods is left with a report", job.Name))
		return true, nil
	}
	raw, pod := out.raw, out.pod
	rep, err := checkreport.Parse([]byte(raw))
	var bad *checkreport.Error
	if errors.As(err, &bad) {
		r.checkUnusable(line, p, st, bad.Reason, fmt.Sprintf("report of Pod %s: %s", pod, bad.Message))
		return true, nil
	}
	if err != nil {
		return false, err
	}
	st.FinishedTime = p.now.DeepCopy()
	rows := rep.Rows
	st.Rows = &rows
	st.DataQuality, st.Drift = v1alpha1.CheckOK, v1alpha1.CheckNotDetected
	if !rep.DataQuality.OK {
		st.DataQuality = v1alpha1.CheckFailed
	}
	if rep.Drift.Detected {
		st.Drift = v1alpha1.CheckDetected
	}
	st.Message = text.Truncate(summarise(rep), 2048)
	countCheck(line, p, st)
	kind := corev1.EventTypeNormal
	if st.DataQuality != v1alpha1.CheckOK {
		kind = corev1.EventTypeWarning
	}
	p.eventFor(fmt.Sprintf("Check/%d", st.Number), line, nil, kind, "CheckFinished", "check Job %s: %s", job.Name, st.Message)
	return true, nil
}

func countCheck(line *v1alpha1.ModelLine, p *pass, st *v1alpha1.CheckRunStatus) {
	dq, drift := string(st.DataQuality), string(st.Drift)
	p.count(func() { checkRuns.WithLabelValues(line.Namespace, line.Name, dq, drift).Inc() })
}

// summarise says what a check report found, briefly.
func summarise(rep *checkreport.Report) string {
	var b strings.Builder
	fmt.Fprintf(&b, "%d rows against %d in the reference; ", rep.Rows, rep.ReferenceRows)
	if rep.DataQuality.OK {
		b.WriteString("data quality ok")
	} else {
		var fs []string
		for i, f := range rep.DataQuality.Findings {
			if i == 3 {
				fs = append(fs, fmt.Sprintf("and %d more", len(rep.DataQuality.Findings)-3))
				break
			}
			s := f.Check
			if f.Column != "" {
				s += " " + f.Column
			}
			s += fmt.Sprintf(" (%d rows", f.Count)
			if f.Share != nil {
				s += ", " + promq.Format(*f.Share*100) + "%"
			}
			if f.Example != "" {
				s += ", e.g. " + f.Example
			}
			fs = append(fs, s+")")
		}
		b.WriteString("data quality failed: " + strings.Join(fs, "; "))
	}
	var drifted []string
	for _, f := range rep.Drift.Features {
		if f.Drifted {
			drifted = append(drifted, f.Feature)
		}
	}
	if rep.Drift.Detected {
		fmt.Fprintf(&b, "; drift detected (the drifted features carry %s of the weight, limit %s): %s", promq.Format(rep.Drift.DriftedWeight), promq.Format(rep.Drift.Limit), strings.Join(drifted, ", "))
	} else {
		fmt.Fprintf(&b, "; no drift to act on (the drifted features carry %s of the weight, limit %s)", promq.Format(rep.Drift.DriftedWeight), promq.Format(rep.Drift.Limit))
		if len(drifted) > 0 {
			b.WriteString(": only " + strings.Join(drifted, ", "))
		}
	}
	if rep.Truncated {
		b.WriteString(" (the report was truncated; the Job's full report has the rest)")
	}
	return b.String()
}

// answers turns a finished check run into checks.
func answers(st *v1alpha1.CheckRunStatus) jobChecks {
	name := st.Job
	unknown := st.DataQuality == v1alpha1.CheckUnknown
	mk := func(kind string, breached bool, what string) check {
		c := check{Kind: kind, Name: name, Known: !unknown, Breached: breached}
		if unknown {
			c.Err = st.Message
		} else {
			c.Text = fmt.Sprintf("check Job %s: %s", name, what)
		}
		return c
	}
	jc := jobChecks{
		dataQuality: mk("data-quality", st.DataQuality == v1alpha1.CheckFailed, st.Message),
		drift:       mk("drift", st.Drift == v1alpha1.CheckDetected, st.Message),
	}
	jc.rows = check{Kind: "fresh-data", Name: name, Known: st.Rows != nil, Err: st.Message}
	if st.Rows != nil {
		jc.rows.Value = float64(*st.Rows)
		jc.rows.Text = fmt.Sprintf("check Job %s saw %d new rows", name, *st.Rows)
	}
	return jc
}

// pruneCheckJobs deletes the line's older check Jobs, keeping the newest
// few for their logs.
func (r *Reconciler) pruneCheckJobs(ctx context.Context, line *v1alpha1.ModelLine, vw *view, newest int32) error {
	type numbered struct {
		n   int
		job *batchv1.Job
	}
	var old []numbered
	for _, job := range vw.jobs {
		if job.Labels[v1alpha1.RoleLabel] != roleCheck || !metav1.IsControlledBy(job, line) {
			continue
		}
		var n int
		if _, err := fmt.Sscan(job.Labels[numberLabel], &n); err != nil || int32(n) >= newest {
			continue
		}
		old = append(old, numbered{n, job})
	}
	sort.Slice(old, func(i, j int) bool { return old[i].n > old[j].n })
	for i, o := range old {
		if i < checkJobsKept-1 {
			continue
		}
		err := r.Delete(ctx, o.job, client.PropagationPolicy(metav1.DeletePropagationBackground))
		if err != nil && !apierrors.IsNotFound(err) {
			return fmt.Errorf("delete old check Job %s: %w", o.job.Name, err)
		}
	}
	return nil
}
