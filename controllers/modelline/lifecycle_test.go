package modelline

import (
	"encoding/json"
	"fmt"
	"strings"
	"testing"
	"time"

	appsv1 "k8s.io/api/apps/v1"
	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/types"
	"k8s.io/apimachinery/pkg/util/strategicpatch"
	"k8s.io/apimachinery/pkg/util/validation"
	"k8s.io/utils/ptr"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/contract/jobenv"
)

func TestChildNames(t *testing.T) {
	long := strings.Repeat("late-risk-for-the-north-harbour-depot-", 5) // 190 characters
	cases := []struct {
		got, want string
	}{
		{jobName("late-risk-v12", roleTraining), "late-risk-v12-train"},
		{jobName("late-risk-v12", roleGate), "late-risk-v12-gate"},
		{versionName("late-risk", 3), "late-risk-v3"},
	}
	for _, c := range cases {
		if c.got != c.want {
			t.Errorf("got %q, want %q", c.got, c.want)
		}
	}
	// Long names are shortened with a hash, deterministically, stay valid,
	// and stay distinct.
	a, b := jobName(long+"v1", roleTraining), jobName(long+"v2", roleTraining)
	if a == b || a != jobName(long+"v1", roleTraining) {
		t.Errorf("long job names %q and %q", a, b)
	}
	for _, n := range []string{a, b} {
		if errs := validation.IsDNS1123Label(n); len(errs) > 0 {
			t.Errorf("%q is not a valid Job name: %v", n, errs)
		}
		if !strings.HasSuffix(n, "-train") {
			t.Errorf("%q lost its role", n)
		}
	}
	for _, v := range []string{long, long + "x", "short"} {
		lv := labelValue(v)
		if errs := validation.IsValidLabelValue(lv); len(errs) > 0 {
			t.Errorf("labelValue(%q) = %q: %v", v, lv, errs)
		}
	}
	if labelValue(long) == labelValue(long+"x") {
		t.Error("distinct long names share a label value")
	}
	vn := versionName(strings.Repeat("l", 253), 7)
	if len(vn) > 253 || !strings.HasSuffix(vn, "-v7") {
		t.Errorf("version name of a long line: %q (%d)", vn, len(vn))
	}
}

func trainingLine() *v1alpha1.ModelLine {
	line := &v1alpha1.ModelLine{ObjectMeta: metav1.ObjectMeta{Name: "late-risk", Namespace: "larkspur"}}
	line.Spec.Training = &v1alpha1.TrainingSpec{
		ArtifactURI: "s3://m/{{.Number}}",
		JobTemplate: batchv1.JobTemplateSpec{
			ObjectMeta: metav1.ObjectMeta{Labels: map[string]string{"team": "routing"}, Annotations: map[string]string{"cost-centre": "ops"}},
			Spec: batchv1.JobSpec{BackoffLimit: ptr.To[int32](2), Template: corev1.PodTemplateSpec{Spec: corev1.PodSpec{
				InitContainers: []corev1.Container{{Name: "fetch"}},
				Containers: []corev1.Container{
					{Name: "train", Env: []corev1.EnvVar{{Name: "EPOCHS", Value: "20"}, {Name: "PLUMBLINE_REASON", Value: "stale"}}},
					{Name: "sidecar"},
				},
			}}},
		},
	}
	line.Spec.Gate.JobTemplate = line.Spec.Training.JobTemplate
	return line
}

func TestBuildTrainingJob(t *testing.T) {
	line := trainingLine()
	v := &v1alpha1.ModelVersion{ObjectMeta: metav1.ObjectMeta{Name: "late-risk-v4", Namespace: "larkspur", UID: types.UID("v4-uid")},
		Spec: v1alpha1.ModelVersionSpec{Line: "late-risk", Source: v1alpha1.SourceTrained, Cause: "Trigger/auc-drop", ArtifactURI: "s3://m/4"}}
	from := time.Date(2026, 10, 26, 2, 30, 0, 0, time.UTC)
	to := time.Date(2026, 11, 2, 2, 30, 0, 0, time.UTC)
	job := buildTrainingJob(line, v, dataWindow{from: &from, to: to})

	if job.Name != "late-risk-v4-train" || job.Namespace != "larkspur" {
		t.Errorf("name %s/%s", job.Namespace, job.Name)
	}
	if ref := metav1.GetControllerOf(job); ref == nil || ref.UID != "v4-uid" || ref.Kind != "ModelVersion" {
		t.Errorf("owner %v", ref)
	}
	if job.Labels["team"] != "routing" || job.Labels[v1alpha1.RoleLabel] != "train" || job.Spec.Template.Labels[v1alpha1.VersionLabel] != "late-risk-v4" {
		t.Errorf("labels %v / %v", job.Labels, job.Spec.Template.Labels)
	}
	if job.Annotations["cost-centre"] != "ops" || job.Annotations[dataToAnnotation] != "2026-11-02T02:30:00Z" || job.Annotations[dataFromAnnotation] != "2026-10-26T02:30:00Z" {
		t.Errorf("annotations %v", job.Annotations)
	}
	if job.Spec.Template.Spec.RestartPolicy != corev1.RestartPolicyNever || *job.Spec.BackoffLimit != 2 {
		t.Errorf("spec %+v", job.Spec)
	}
	want := map[string]string{jobenv.Line: "late-risk", jobenv.Version: "late-risk-v4", jobenv.ArtifactURI: "s3://m/4",
		jobenv.Reason: "Trigger/auc-drop", jobenv.DataFrom: "2026-10-26T02:30:00Z", jobenv.DataTo: "2026-11-02T02:30:00Z"}
	pod := job.Spec.Template.Spec
	for _, c := range append(pod.InitContainers, pod.Containers...) {
		got := map[string]string{}
		count := map[string]int{}
		for _, e := range c.Env {
			got[e.Name] = e.Value
			count[e.Name]++
		}
		for k, w := range want {
			if got[k] != w || count[k] != 1 {
				t.Errorf("container %s: %s = %q (%d times), want %q once", c.Name, k, got[k], count[k], w)
			}
		}
		if c.Name == "train" && got["EPOCHS"] != "20" {
			t.Errorf("the template's own variable was lost: %v", got)
		}
	}
	// The template itself is not changed.
	if len(line.Spec.Training.JobTemplate.Spec.Template.Spec.Containers[0].Env) != 2 || line.Spec.Training.JobTemplate.Spec.Template.Labels != nil {
		t.Error("building the Job changed the line's template")
	}
	w, err := windowFromJob(job)
	if err != nil || !w.to.Equal(to) || w.from == nil || !w.from.Equal(from) {
		t.Errorf("window read back: %v %v", w, err)
	}
}

func TestBuildGateJob(t *testing.T) {
	line := trainingLine()
	v := &v1alpha1.ModelVersion{ObjectMeta: metav1.ObjectMeta{Name: "late-risk-v4"}, Spec: v1alpha1.ModelVersionSpec{ArtifactURI: "s3://m/4"}}
	base := &v1alpha1.ModelVersion{ObjectMeta: metav1.ObjectMeta{Name: "late-risk-v3"}, Spec: v1alpha1.ModelVersionSpec{ArtifactURI: "s3://m/3"}}
	job := buildGateJob(line, v, base, dataWindow{to: time.Now()})
	env := map[string]string{}
	for _, e := range job.Spec.Template.Spec.Containers[0].Env {
		env[e.Name] = e.Value
	}
	if job.Name != "late-risk-v4-gate" || env[jobenv.CandidateURI] != "s3://m/4" || env[jobenv.BaselineURI] != "s3://m/3" || job.Annotations[baselineVersionAnnotation] != "late-risk-v3" {
		t.Errorf("gate job %s, env %v, annotations %v", job.Name, env, job.Annotations)
	}
	if env[jobenv.GateMetrics] != "" || env[jobenv.GateSegments] != "none" || env[jobenv.GateConfidence] != "0.95" {
		t.Errorf("gate env with no criteria: %q %q %q", env[jobenv.GateMetrics], env[jobenv.GateSegments], env[jobenv.GateConfidence])
	}
	noBase := buildGateJob(line, v, nil, dataWindow{to: time.Now()})
	if _, ok := noBase.Annotations[baselineVersionAnnotation]; ok {
		t.Error("a baseline annotation without a baseline")
	}
}

func TestJobResult(t *testing.T) {
	cond := func(typ batchv1.JobConditionType, status corev1.ConditionStatus, reason string) batchv1.JobCondition {
		return batchv1.JobCondition{Type: typ, Status: status, Reason: reason, Message: "m"}
	}
	cases := []struct {
		conds  []batchv1.JobCondition
		want   jobOutcome
		reason string
	}{
		{nil, jobRunning, ""},
		{[]batchv1.JobCondition{cond(batchv1.JobSuccessCriteriaMet, corev1.ConditionTrue, "")}, jobRunning, ""},
		{[]batchv1.JobCondition{cond(batchv1.JobSuccessCriteriaMet, corev1.ConditionTrue, ""), cond(batchv1.JobComplete, corev1.ConditionTrue, "")}, jobSucceeded, ""},
		{[]batchv1.JobCondition{cond(batchv1.JobFailureTarget, corev1.ConditionTrue, "DeadlineExceeded")}, jobRunning, ""},
		{[]batchv1.JobCondition{cond(batchv1.JobFailed, corev1.ConditionTrue, "BackoffLimitExceeded")}, jobFailed, "BackoffLimitExceeded"},
		{[]batchv1.JobCondition{cond(batchv1.JobFailed, corev1.ConditionTrue, "")}, jobFailed, "JobFailed"},
		{[]batchv1.JobCondition{cond(batchv1.JobFailed, corev1.ConditionFalse, "x")}, jobRunning, ""},
	}
	for i, c := range cases {
		got, reason, _ := jobResult(&batchv1.Job{Status: batchv1.JobStatus{Conditions: c.conds}})
		if got != c.want || reason != c.reason {
			t.Errorf("case %d: %v %q, want %v %q", i, got, reason, c.want, c.reason)
		}
	}
}

func TestTerminationMessage(t *testing.T) {
	job := &batchv1.Job{ObjectMeta: metav1.ObjectMeta{Name: "j", UID: "job-uid"}}
	at := func(m int) metav1.Time { return metav1.NewTime(time.Date(2026, 11, 2, 9, m, 0, 0, time.UTC)) }
	pod := func(name string, created metav1.Time, phase corev1.PodPhase, owned bool, msgs ...string) corev1.Pod {
		p := corev1.Pod{ObjectMeta: metav1.ObjectMeta{Name: name, CreationTimestamp: created}}
		if owned {
			p.OwnerReferences = []metav1.OwnerReference{*metav1.NewControllerRef(job, batchv1.SchemeGroupVersion.WithKind("Job"))}
		}
		p.Status.Phase = phase
		for i, m := range msgs {
			n := fmt.Sprintf("c%d", i)
			p.Spec.Containers = append(p.Spec.Containers, corev1.Container{Name: n})
			p.Status.ContainerStatuses = append(p.Status.ContainerStatuses, corev1.ContainerStatus{Name: n,
				State: corev1.ContainerState{Terminated: &corev1.ContainerStateTerminated{Message: m}}})
		}
		return p
	}
	pods := []corev1.Pod{
		pod("retry-1", at(1), corev1.PodFailed, true, "", "crashed"),
		pod("ok", at(2), corev1.PodSucceeded, true, "sidecar says hi", "REPORT"),
		pod("retry-3", at(3), corev1.PodFailed, true, "", "crashed again"),
		pod("other-job", at(4), corev1.PodSucceeded, false, "", "NOT OURS"),
		pod("running", at(5), corev1.PodRunning, true, "", "not yet"),
	}
	msg, name, found := terminationMessage(job, pods)
	if !found || name != "ok" || msg != "REPORT" {
		t.Errorf("got %q from %q (%v); want the succeeded Pod's last container", msg, name, found)
	}
	msg, name, found = terminationMessage(job, []corev1.Pod{pods[0], pods[2], pods[3]})
	if !found || name != "retry-3" || msg != "crashed again" {
		t.Errorf("no success: got %q from %q; want the newest failed Pod", msg, name)
	}
	if _, _, found := terminationMessage(job, []corev1.Pod{pods[3], pods[4]}); found {
		t.Error("found a report in a Pod that is not the Job's, or has not finished")
	}
}

func servingDeployment() *appsv1.Deployment {
	return &appsv1.Deployment{
		ObjectMeta: metav1.ObjectMeta{Name: "late-risk-scorer", Generation: 4},
		Spec: appsv1.DeploymentSpec{Replicas: ptr.To[int32](3), Template: corev1.PodTemplateSpec{
			ObjectMeta: metav1.ObjectMeta{Annotations: map[string]string{"team": "routing"}},
			Spec: corev1.PodSpec{Containers: []corev1.Container{
				{Name: "proxy", Env: []corev1.EnvVar{{Name: "MODEL_URI", Value: "untouched"}}},
				{Name: "scorer", Image: "scorer:2", Env: []corev1.EnvVar{
					{Name: "THRESHOLD", Value: "0.35"},
					{Name: "MODEL_URI", ValueFrom: &corev1.EnvVarSource{ConfigMapKeyRef: &corev1.ConfigMapKeySelector{Key: "uri"}}},
				}},
			}},
		}},
	}
}

// The serving patch, applied the way the API server applies a strategic
// merge patch, changes only the artifact variable and the annotation.
func TestServePatch(t *testing.T) {
	s := v1alpha1.ServingSpec{DeploymentName: "late-risk-scorer", ContainerName: "scorer"}
	dep := servingDeployment()
	for _, to := range []served{{artifact: "s3://m/7", version: "late-risk-v7"}, {artifact: "s3://m/0", version: ""}} {
		patch, err := servePatch(s, to)
		if err != nil {
			t.Fatal(err)
		}
		orig, _ := json.Marshal(dep)
		out, err := strategicpatch.StrategicMergePatch(orig, patch, appsv1.Deployment{})
		if err != nil {
			t.Fatal(err)
		}
		var got appsv1.Deployment
		if err := json.Unmarshal(out, &got); err != nil {
			t.Fatal(err)
		}
		if sv := servedBy(&got, s); sv != to {
			t.Errorf("after the patch the Deployment serves %+v, want %+v", sv, to)
		}
		want := dep.DeepCopy()
		want.Spec.Template.Spec.Containers[1].Env[1] = corev1.EnvVar{Name: "MODEL_URI", Value: to.artifact}
		if to.version != "" {
			want.Spec.Template.Annotations[v1alpha1.VersionAnnotation] = to.version
		}
		a, _ := json.Marshal(want)
		b, _ := json.Marshal(&got)
		if string(a) != string(b) {
			t.Errorf("the patch changed more than it should:\nwant %s\ngot  %s", a, b)
		}
	}
}

func TestRolloutState(t *testing.T) {
	base := func() *appsv1.Deployment {
		d := servingDeployment()
		d.Status = appsv1.DeploymentStatus{ObservedGeneration: 4, Replicas: 3, UpdatedReplicas: 3, AvailableReplicas: 3}
		return d
	}
	deadline := appsv1.DeploymentCondition{Type: appsv1.DeploymentProgressing, Status: corev1.ConditionFalse, Reason: "ProgressDeadlineExceeded"}
	cases := []struct {
		name   string
		mutate func(*appsv1.Deployment)
		want   rollout
		text   string
	}{
		{"complete", func(*appsv1.Deployment) {}, rolloutComplete, "3 of 3"},
		{"generation not seen", func(d *appsv1.Deployment) { d.Generation = 5 }, rolloutProgressing, "generation 5"},
		{"not all updated", func(d *appsv1.Deployment) { d.Status.UpdatedReplicas = 1 }, rolloutProgressing, "1 of 3 replicas updated"},
		{"old replicas left", func(d *appsv1.Deployment) { d.Status.Replicas = 4 }, rolloutProgressing, "1 old replicas"},
		{"not available", func(d *appsv1.Deployment) { d.Status.AvailableReplicas = 2 }, rolloutProgressing, "2 of 3 updated replicas available"},
		{"deadline exceeded", func(d *appsv1.Deployment) {
			d.Status.UpdatedReplicas = 1
			d.Status.Conditions = []appsv1.DeploymentCondition{deadline}
		}, rolloutFailed, "progress deadline"},
		{"deadline of an older generation", func(d *appsv1.Deployment) {
			d.Generation = 5
			d.Status.Conditions = []appsv1.DeploymentCondition{deadline}
		}, rolloutProgressing, "generation 5"},
		{"paused", func(d *appsv1.Deployment) { d.Spec.Paused = true; d.Status.UpdatedReplicas = 0 }, rolloutProgressing, "paused"},
	}
	for _, c := range cases {
		d := base()
		c.mutate(d)
		got, msg := rolloutState(d)
		if got != c.want || !strings.Contains(msg, c.text) {
			t.Errorf("%s: %v %q, want %v containing %q", c.name, got, msg, c.want, c.text)
		}
	}
}

func version(name string, created int, phase v1alpha1.VersionPhase, source v1alpha1.VersionSource) *v1alpha1.ModelVersion {
	return &v1alpha1.ModelVersion{
		ObjectMeta: metav1.ObjectMeta{Name: name, CreationTimestamp: metav1.NewTime(time.Date(2026, 11, 1, 0, created, 0, 0, time.UTC))},
		Spec:       v1alpha1.ModelVersionSpec{Source: source},
		Status:     v1alpha1.ModelVersionStatus{Phase: phase},
	}
}

func TestPruneList(t *testing.T) {
	vs := []*v1alpha1.ModelVersion{
		version("v5", 5, v1alpha1.PhaseRejected, v1alpha1.SourceTrained),
		version("v1", 1, v1alpha1.PhaseArchived, v1alpha1.SourceTrained),
		version("rules", 0, v1alpha1.PhaseArchived, v1alpha1.SourceRuleBased),
		version("v2", 2, v1alpha1.PhaseFailed, v1alpha1.SourceTrained),
		version("v3", 3, v1alpha1.PhaseArchived, v1alpha1.SourceTrained),
		version("v4", 4, v1alpha1.PhaseLive, v1alpha1.SourceTrained),
		version("v6", 6, v1alpha1.PhaseTraining, v1alpha1.SourceTrained),
	}
	names := func(l []entry) string {
		var s []string
		for _, e := range l {
			s = append(s, e.meta.Name)
		}
		return strings.Join(s, ",")
	}
	vw := &view{versions: vs}
	cases := []struct {
		live, previous string
		limit          int32
		want           string
	}{
		{"v4", "v3", 10, ""},
		{"v4", "v3", 2, "v1"},             // finished, oldest first: v1, v2, v5 (v3 is previous)
		{"v4", "v3", 1, "v1,v2"},          // the newest finished one stays
		{"v4", "v3", 0, "v1,v2,v5"},       // never the live, previous, rule-based or in-flight
		{"v4", "", 0, "v1,v2,v3,v5"},      // without a previous, v3 goes too
		{"", "", 0, "v1,v2,v3,v5"},        // v4 is Live but not finished
		{"v4", "v1", 1, "v2,v3"},          // v1 is previous: kept
		{"v4", "v3", -1, "v1,v2,v5"},      // nonsense limit: nothing kept but what must be
		{"v4", "rules", 0, "v1,v2,v3,v5"}, // rules is never pruned
	}
	for _, c := range cases {
		if got := names(pruneList(entries(vw), c.live, c.previous, c.limit)); got != c.want {
			t.Errorf("live %s previous %s limit %d: pruned %q, want %q", c.live, c.previous, c.limit, got, c.want)
		}
	}

	// History versions (metadata only, their phase in the label) count
	// against the limit and go first when oldest; one also among the
	// pass's versions (just labelled) counts once.
	hist := func(name string, created int, phase v1alpha1.VersionPhase) *metav1.PartialObjectMetadata {
		return &metav1.PartialObjectMetadata{ObjectMeta: metav1.ObjectMeta{Name: name,
			CreationTimestamp: metav1.NewTime(time.Date(2026, 11, 1, 0, created, 0, 0, time.UTC)),
			Labels:            map[string]string{v1alpha1.HistoryLabel: string(phase)}}}
	}
	vw.history = []*metav1.PartialObjectMetadata{hist("v0", 0, v1alpha1.PhaseRejected), hist("v5", 5, v1alpha1.PhaseRejected)}
	if got, want := names(pruneList(entries(vw), "v4", "v3", 2)), "v0,v1"; got != want {
		t.Errorf("with history: pruned %q, want %q", got, want)
	}
	if got, want := names(pruneList(entries(vw), "v4", "v3", 4)), ""; got != want {
		t.Errorf("with history, limit 4 (v0, v1, v2, v5): pruned %q, want %q", got, want)
	}
}

func TestViewActiveAndLive(t *testing.T) {
	at := func(m int) *metav1.Time { t := metav1.NewTime(time.Date(2026, 11, 1, 0, m, 0, 0, time.UTC)); return &t }
	v1 := version("v1", 1, v1alpha1.PhaseLive, v1alpha1.SourceTrained)
	v1.Status.PromotedTime = at(10)
	v2 := version("v2", 2, v1alpha1.PhaseLive, v1alpha1.SourceTrained)
	v2.Status.PromotedTime = at(20)
	rules := version("rules", 0, "", v1alpha1.SourceRuleBased)
	v3 := version("v3", 3, v1alpha1.PhaseRejected, v1alpha1.SourceTrained)
	v4 := version("v4", 4, "", v1alpha1.SourceTrained)
	v5 := version("v5", 5, "", v1alpha1.SourceTrained)
	vw := &view{versions: []*v1alpha1.ModelVersion{rules, v1, v2, v3, v4, v5}}
	if vw.live() != v2 {
		t.Errorf("live %v, want v2 (promoted last)", vw.live().Name)
	}
	if vw.active() != v4 {
		t.Errorf("active %v, want v4: the oldest in flight, rule-based excluded", vw.active().Name)
	}

	p := &pass{now: metav1.NewTime(time.Date(2026, 11, 2, 0, 0, 0, 0, time.UTC))}
	settle(&v1alpha1.ModelLine{}, vw, p)
	if v1.Status.Phase != v1alpha1.PhaseArchived || v1.Status.ArchivedTime == nil || v2.Status.Phase != v1alpha1.PhaseLive {
		t.Errorf("after settle: v1 %s, v2 %s", v1.Status.Phase, v2.Status.Phase)
	}
	if rules.Status.Phase != v1alpha1.PhaseStandby {
		t.Errorf("rules %s, want Standby", rules.Status.Phase)
	}
	queue(vw, p)
	// v4 is the active one, about to be stepped; v5 waits behind it.
	if v4.Status.Phase != "" || v5.Status.Phase != v1alpha1.PhasePending || v5.Status.Reason != reasonQueued {
		t.Errorf("queue: v4 %q, v5 %q (%s)", v4.Status.Phase, v5.Status.Phase, v5.Status.Reason)
	}
}

func TestRetrainingCondition(t *testing.T) {
	mk := func(phase v1alpha1.VersionPhase, reason, msg string) *v1alpha1.ModelVersion {
		v := version("late-risk-v2", 2, phase, v1alpha1.SourceTrained)
		v.Status.Reason, v.Status.Message = reason, msg
		return v
	}
	cases := []struct {
		versions []*v1alpha1.ModelVersion
		status   metav1.ConditionStatus
		reason   string
		text     string
	}{
		{nil, metav1.ConditionFalse, "NoRetrain", "no version"},
		{[]*v1alpha1.ModelVersion{mk(v1alpha1.PhaseTraining, "TrainingStarted", "training Job runs")}, metav1.ConditionTrue, "Training", "late-risk-v2: training Job runs"},
		{[]*v1alpha1.ModelVersion{mk("", "", "")}, metav1.ConditionTrue, "Pending", "late-risk-v2"},
		{[]*v1alpha1.ModelVersion{mk(v1alpha1.PhaseLive, "Promoted", "serving")}, metav1.ConditionFalse, "Promoted", "serving"},
		{[]*v1alpha1.ModelVersion{mk(v1alpha1.PhaseRejected, "CriteriaNotMet", "gate failed: roc_auc")}, metav1.ConditionFalse, "GateFailed", "roc_auc"},
		{[]*v1alpha1.ModelVersion{mk(v1alpha1.PhaseRejected, reasonRejectedByPerson, "no")}, metav1.ConditionFalse, reasonRejectedByPerson, "no"},
		{[]*v1alpha1.ModelVersion{mk(v1alpha1.PhaseFailed, "BackoffLimitExceeded", "training Job failed")}, metav1.ConditionFalse, "TrainingFailed", "training Job failed"},
		{[]*v1alpha1.ModelVersion{mk(v1alpha1.PhaseFailed, reasonRolloutFailed, "deadline")}, metav1.ConditionFalse, reasonRolloutFailed, "deadline"},
	}
	for i, c := range cases {
		got := retrainingCondition(&view{versions: c.versions})
		if got.Status != c.status || got.Reason != c.reason || !strings.Contains(got.Message, c.text) {
			t.Errorf("case %d: %s/%s %q, want %s/%s containing %q", i, got.Status, got.Reason, got.Message, c.status, c.reason, c.text)
		}
	}
}

func TestNextNumber(t *testing.T) {
	line := &v1alpha1.ModelLine{}
	line.Status.VersionCount = 3
	vs := []*v1alpha1.ModelVersion{{}, {}}
	vs[0].Labels = map[string]string{numberLabel: "2"}
	vs[1].Labels = map[string]string{numberLabel: "7"}
	if n := nextNumber(line, &view{versions: vs}); n != 8 {
		t.Errorf("next %d, want 8 (one past the highest label)", n)
	}
	if n := nextNumber(line, &view{}); n != 4 {
		t.Errorf("next %d, want 4 (one past the count)", n)
	}
}

func TestGateAsks(t *testing.T) {
	cases := []struct {
		criteria             []v1alpha1.GateCriterion
		metrics, segs, confi string
	}{
		{[]v1alpha1.GateCriterion{{Metric: "roc_auc", Minimum: ptr.To(0.8)}, {Metric: "roc_auc", MaxRegression: ptr.To(0.005), Confidence: ptr.To(0.9)},
			{Metric: "log_loss", Maximum: ptr.To(0.45)}, {Metric: "recall", Segment: "*", MaxRegression: ptr.To(0.02)}},
			"roc_auc,log_loss,recall", "*", "0.95"},
		{[]v1alpha1.GateCriterion{{Metric: "recall", Segment: "harbour", MaxRegression: ptr.To(0.02), Confidence: ptr.To(0.99)}, {Metric: "recall", Segment: "north", Minimum: ptr.To(0.7)}},
			"recall", "harbour,north", "0.99"},
		{[]v1alpha1.GateCriterion{{Metric: "rmse", Maximum: ptr.To(3.0)}}, "rmse", "none", "0.95"},
	}
	for _, c := range cases {
		m, s, conf := gateAsks(c.criteria)
		if m != c.metrics || s != c.segs || conf != c.confi {
			t.Errorf("gateAsks: %q %q %q; want %q %q %q", m, s, conf, c.metrics, c.segs, c.confi)
		}
	}
}
