package modelline

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"strconv"
	"strings"
	"time"

	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/types"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/contract/jobenv"
	"plumbline.dev/plumbline/internal/engine/text"
)

// jobNamed reads a Job of the line by name, from the cache or, when the
// cache does not have it yet, from the API server; nil when it is gone.
func (r *Reconciler) jobNamed(ctx context.Context, vw *view, namespace, name string) (*batchv1.Job, error) {
	if job := vw.jobs[name]; job != nil {
		return job, nil
	}
	var job batchv1.Job
	err := r.APIReader.Get(ctx, types.NamespacedName{Namespace: namespace, Name: name}, &job)
	if apierrors.IsNotFound(err) {
		return nil, nil
	}
	if err != nil {
		return nil, fmt.Errorf("read Job %s: %w", name, err)
	}
	return &job, nil
}

// Job roles, in the plumbline.dev/role label and the Job name's suffix.
const (
	roleTraining = "train"
	roleGate     = "gate"
)

// Annotations on the Jobs the controller creates, so a pass that finds a
// Job it created before a crash reads back what it decided then.
const (
	dataFromAnnotation        = "plumbline.dev/data-from"
	dataToAnnotation          = "plumbline.dev/data-to"
	baselineVersionAnnotation = "plumbline.dev/baseline-version"
	numberLabel               = v1alpha1.NumberLabel
)

// gateAsks sums up what the criteria judge: the metrics (comma-separated,
// in the criteria's order), the segments ("*" when a criterion asks for
// every one, else the named ones, else "none") and the highest confidence
// asked (0.95 by default).
func gateAsks(criteria []v1alpha1.GateCriterion) (metrics, segments, confidence string) {
	var ms, segs []string
	seenM, seenS := map[string]bool{}, map[string]bool{}
	all := false
	conf := 0.0
	for _, c := range criteria {
		if !seenM[c.Metric] {
			seenM[c.Metric] = true
			ms = append(ms, c.Metric)
		}
		switch c.Segment {
		case "":
		case "*":
			all = true
		default:
			if !seenS[c.Segment] {
				seenS[c.Segment] = true
				segs = append(segs, c.Segment)
			}
		}
		if c.MaxRegression != nil {
			cc := 0.95
			if c.Confidence != nil {
				cc = *c.Confidence
			}
			conf = max(conf, cc)
		}
	}
	switch {
	case all:
		segments = "*"
	case len(segs) > 0:
		segments = strings.Join(segs, ",")
	default:
		segments = "none"
	}
	if conf == 0 {
		conf = 0.95
	}
	return strings.Join(ms, ","), segments, strconv.FormatFloat(conf, 'g', -1, 64)
}

// childName derives a name from base and suffix that fits max characters:
// base-suffix when it fits, else a shortened base with a hash of the whole
// base, so distinct bases keep distinct names. The same inputs always give
// the same name, which is what makes a create after a crash find the object
// the first attempt made.
func childName(base, suffix string, max int) string {
	name := base + "-" + suffix
	if len(name) <= max {
		return name
	}
	hash := shortHash(base)
	keep := max - len(suffix) - len(hash) - 2
	return base[:keep] + "-" + hash + "-" + suffix
}

func shortHash(s string) string {
	sum := sha256.Sum256([]byte(s))
	return hex.EncodeToString(sum[:])[:8]
}

// jobName is the name of a version's Job for a role. Job names are kept to 63
// characters because the Job controller copies them into a Pod label.
func jobName(version, role string) string { return childName(version, role, 63) }

// versionName is the name of a line's version number n.
func versionName(line string, n int32) string { return childName(line, fmt.Sprintf("v%d", n), 253) }

// labelValue fits a name into a label value (63 characters).
func labelValue(s string) string {
	if len(s) <= 63 {
		return s
	}
	return s[:54] + "-" + shortHash(s)
}

// dataWindow is the span of data a training run covers.
type dataWindow struct {
	from *time.Time // nil: no earlier training, all history
	to   time.Time
}

func formatTime(t *time.Time) string {
	if t == nil {
		return ""
	}
	return t.UTC().Format(time.RFC3339)
}

// buildTrainingJob renders the line's training Job for a version.
func buildTrainingJob(line *v1alpha1.ModelLine, v *v1alpha1.ModelVersion, w dataWindow) *batchv1.Job {
	job := jobFromTemplate(&line.Spec.Training.JobTemplate, line, v, roleTraining)
	job.Annotations[dataFromAnnotation] = formatTime(w.from)
	job.Annotations[dataToAnnotation] = formatTime(&w.to)
	injectEnv(&job.Spec.Template.Spec, versionEnv(line, v, w))
	return job
}

// buildGateJob renders the line's evaluation Job for a candidate against a
// baseline (nil when the line has no live version).
func buildGateJob(line *v1alpha1.ModelLine, v *v1alpha1.ModelVersion, baseline *v1alpha1.ModelVersion, w dataWindow) *batchv1.Job {
	job := jobFromTemplate(&line.Spec.Gate.JobTemplate, line, v, roleGate)
	baseURI := ""
	if baseline != nil {
		job.Annotations[baselineVersionAnnotation] = baseline.Name
		baseURI = baseline.Spec.ArtifactURI
	}
	metrics, segments, confidence := gateAsks(line.Spec.Gate.Criteria)
	env := append(versionEnv(line, v, w),
		corev1.EnvVar{Name: jobenv.CandidateURI, Value: v.Spec.ArtifactURI},
		corev1.EnvVar{Name: jobenv.BaselineURI, Value: baseURI},
		corev1.EnvVar{Name: jobenv.GateMetrics, Value: metrics},
		corev1.EnvVar{Name: jobenv.GateSegments, Value: segments},
		corev1.EnvVar{Name: jobenv.GateConfidence, Value: confidence})
	injectEnv(&job.Spec.Template.Spec, env)
	return job
}

func versionEnv(line *v1alpha1.ModelLine, v *v1alpha1.ModelVersion, w dataWindow) []corev1.EnvVar {
	return []corev1.EnvVar{
		{Name: jobenv.Line, Value: line.Name},
		{Name: jobenv.Version, Value: v.Name},
		{Name: jobenv.ArtifactURI, Value: v.Spec.ArtifactURI},
		{Name: jobenv.Reason, Value: v.Spec.Cause},
		{Name: jobenv.DataFrom, Value: formatTime(w.from)},
		{Name: jobenv.DataTo, Value: formatTime(&w.to)},
	}
}

// jobFromTemplate copies a Job template and marks the Job as the version's:
// name, labels (on the Job and its Pods), owner reference.
func jobFromTemplate(tmpl *batchv1.JobTemplateSpec, line *v1alpha1.ModelLine, v *v1alpha1.ModelVersion, role string) *batchv1.Job {
	return renderJob(tmpl, jobName(v.Name, role), v, "ModelVersion", map[string]string{
		v1alpha1.LineLabel:    labelValue(line.Name),
		v1alpha1.VersionLabel: labelValue(v.Name),
		v1alpha1.RoleLabel:    role,
	})
}

// renderJob copies a Job template under a name, owned by owner (of the
// given kind), with our labels on the Job and its Pods.
func renderJob(tmpl *batchv1.JobTemplateSpec, name string, owner metav1.Object, kind string, ours map[string]string) *batchv1.Job {
	t := tmpl.DeepCopy()
	job := &batchv1.Job{
		ObjectMeta: metav1.ObjectMeta{
			Name:        name,
			Namespace:   owner.GetNamespace(),
			Labels:      merge(t.Labels, ours),
			Annotations: merge(t.Annotations, nil),
			OwnerReferences: []metav1.OwnerReference{*metav1.NewControllerRef(owner,
				v1alpha1.GroupVersion.WithKind(kind))},
		},
		Spec: t.Spec,
	}
	job.Spec.Template.Labels = merge(job.Spec.Template.Labels, ours)
	if job.Spec.Template.Spec.RestartPolicy == "" {
		job.Spec.Template.Spec.RestartPolicy = corev1.RestartPolicyNever
	}
	return job
}

func merge(base, over map[string]string) map[string]string {
	out := make(map[string]string, len(base)+len(over))
	for k, v := range base {
		out[k] = v
	}
	for k, v := range over {
		out[k] = v
	}
	return out
}

// injectEnv sets env in every container and init container, replacing a
// variable of the same name the template set.
func injectEnv(pod *corev1.PodSpec, env []corev1.EnvVar) {
	set := func(cs []corev1.Container) {
		for i := range cs {
			kept := cs[i].Env[:0:0]
			for _, e := range cs[i].Env {
				if !hasEnv(env, e.Name) {
					kept = append(kept, e)
				}
			}
			cs[i].Env = append(kept, env...)
		}
	}
	set(pod.InitContainers)
	set(pod.Containers)
}

func hasEnv(env []corev1.EnvVar, name string) bool {
	for _, e := range env {
		if e.Name == name {
			return true
		}
	}
	return false
}

// jobOutcome is what a Job's conditions say.
type jobOutcome int

const (
	jobRunning jobOutcome = iota
	jobSucceeded
	jobFailed
)

// jobResult reads a Job's terminal condition, with its reason and message
// when it failed.
func jobResult(job *batchv1.Job) (jobOutcome, string, string) {
	for _, c := range job.Status.Conditions {
		if c.Status != corev1.ConditionTrue {
			continue
		}
		switch c.Type {
		case batchv1.JobComplete:
			return jobSucceeded, "", ""
		case batchv1.JobFailed:
			reason := c.Reason
			if reason == "" {
				reason = "JobFailed"
			}
			return jobFailed, reason, c.Message
		}
	}
	return jobRunning, "", ""
}

// windowFromJob reads back the data window a training Job was created with.
func windowFromJob(job *batchv1.Job) (dataWindow, error) {
	var w dataWindow
	to, err := time.Parse(time.RFC3339, job.Annotations[dataToAnnotation])
	if err != nil {
		return w, fmt.Errorf("job %s: annotation %s: %w", job.Name, dataToAnnotation, err)
	}
	w.to = to
	if s := job.Annotations[dataFromAnnotation]; s != "" {
		from, err := time.Parse(time.RFC3339, s)
		if err != nil {
			return w, fmt.Errorf("job %s: annotation %s: %w", job.Name, dataFromAnnotation, err)
		}
		w.from = &from
	}
	return w, nil
}

// terminationMessage finds the report a Job's Pod left: among the Pods the
// Job controls, the newest that succeeded (else the newest that failed), and
// its last container's terminated state. found is false when no Pod has
// terminated.
func terminationMessage(job *batchv1.Job, pods []corev1.Pod) (msg, pod string, found bool) {
	var best *corev1.Pod
	for i := range pods {
		p := &pods[i]
		if !metav1.IsControlledBy(p, job) {
			continue
		}
		if p.Status.Phase != corev1.PodSucceeded && p.Status.Phase != corev1.PodFailed {
			continue
		}
		if best == nil || better(p, best) {
			best = p
		}
	}
	if best == nil || len(best.Spec.Containers) == 0 {
		return "", "", false
	}
	last := best.Spec.Containers[len(best.Spec.Containers)-1].Name
	for _, s := range best.Status.ContainerStatuses {
		if s.Name == last && s.State.Terminated != nil {
			return s.State.Terminated.Message, best.Name, true
		}
	}
	return "", best.Name, true
}

// better prefers a succeeded Pod, then the newer one.
func better(a, b *corev1.Pod) bool {
	as, bs := a.Status.Phase == corev1.PodSucceeded, b.Status.Phase == corev1.PodSucceeded
	if as != bs {
		return as
	}
	return b.CreationTimestamp.Before(&a.CreationTimestamp)
}

// errJobNameTaken is a Job with the version's Job name that the version does
// not own.
var errJobNameTaken = errors.New("job name taken")

// ensureJob creates a child Job (a version's training or evaluation Job,
// or the line's check Job), or finds the one an earlier pass created under
// the same deterministic name: a pass that died between creating the Job
// and recording it adopts it instead of making a second. A Job of that name
// that the owner does not control is errJobNameTaken.
func (r *Reconciler) ensureJob(ctx context.Context, want *batchv1.Job, owner metav1.Object) (*batchv1.Job, bool, error) {
	err := r.Create(ctx, want)
	if err == nil {
		return want, true, nil
	}
	if !apierrors.IsAlreadyExists(err) {
		return nil, false, fmt.Errorf("create Job %s: %w", want.Name, err)
	}
	var got batchv1.Job
	if err := r.APIReader.Get(ctx, client.ObjectKeyFromObject(want), &got); err != nil {
		return nil, false, fmt.Errorf("read existing Job %s: %w", want.Name, err)
	}
	if !metav1.IsControlledBy(&got, owner) {
		return nil, false, errJobNameTaken
	}
	return &got, false, nil
}

// jobReport is what a finished child Job left behind.
type jobReport struct {
	// done is false while the Job runs.
	done bool
	// failed says how the Job failed, with what its Pod said; empty when
	// it completed.
	failed string
	// raw is the report the newest finished Pod's last container left in
	// its termination message; found says a finished Pod was there.
	raw, pod string
	found    bool
}

// readReport reads what a child Job left: its outcome, and the report in
// its Pod's termination message (what names the Job in messages: check,
// evaluation).
func (r *Reconciler) readReport(ctx context.Context, job *batchv1.Job, what string) (jobReport, error) {
	outcome, reason, message := jobResult(job)
	if outcome == jobRunning {
		return jobReport{}, nil
	}
	var pods corev1.PodList
	if err := r.APIReader.List(ctx, &pods, client.InNamespace(job.Namespace), client.MatchingLabels{batchv1.ControllerUidLabel: string(job.UID)}); err != nil {
		return jobReport{}, fmt.Errorf("list Pods of Job %s: %w", job.Name, err)
	}
	out := jobReport{done: true}
	out.raw, out.pod, out.found = terminationMessage(job, pods.Items)
	if outcome == jobFailed {
		detail := ""
		if out.found && out.raw != "" {
			detail = fmt.Sprintf("; Pod %s said: %s", out.pod, text.Truncate(out.raw, 400))
		}
		out.failed = fmt.Sprintf("%s Job %s failed: %s: %s%s", what, job.Name, reason, message, detail)
	}
	return out, nil
}
