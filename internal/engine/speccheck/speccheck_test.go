package speccheck

import (
	"strings"
	"testing"

	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	"k8s.io/utils/ptr"

	"plumbline.dev/plumbline/api/v1alpha1"
)

func job(containers ...string) batchv1.JobTemplateSpec {
	var cs []corev1.Container
	for _, n := range containers {
		cs = append(cs, corev1.Container{Name: n, Image: "example.invalid/img"})
	}
	return batchv1.JobTemplateSpec{Spec: batchv1.JobSpec{Template: corev1.PodTemplateSpec{Spec: corev1.PodSpec{Containers: cs}}}}
}

// validSpec is a line that uses every part CEL cannot judge, all valid.
func validSpec() v1alpha1.ModelLineSpec {
	return v1alpha1.ModelLineSpec{
		Serving:  v1alpha1.ServingSpec{DeploymentName: "late-risk", ContainerName: "scorer"},
		Training: &v1alpha1.TrainingSpec{JobTemplate: job("train"), ArtifactURI: "s3://larkspur-models/{{.Line}}/{{.Number}}"},
		Schedule: &v1alpha1.ScheduleSpec{Cron: "0 3 * * 1", TimeZone: "Europe/London"},
		Triggers: []v1alpha1.TriggerSpec{{
			Name: "auc-drop", Query: `avg_over_time(larkspur_late_risk_auc[1h])`, Below: ptr.To(0.8), ForSeconds: 3600, EverySeconds: 60,
		}},
		Checks: &v1alpha1.ChecksSpec{
			DataQuality: []v1alpha1.QueryCheck{{Name: "address-missing", Query: `larkspur_address_missing_ratio`, Above: ptr.To(0.05)}},
			Drift:       []v1alpha1.QueryCheck{{Name: "depot-psi", Query: `max(larkspur_feature_psi{feature="depot"})`, Above: ptr.To(0.25)}},
			FreshData:   &v1alpha1.FreshDataCheck{Query: `sum(increase(larkspur_labelled_rows_total[7d]))`, AtLeast: 5000},
			JobTemplate: ptr.To(job("datacheck")),
		},
		Gate: v1alpha1.GateSpec{
			JobTemplate: job("evaluate"),
			Criteria: []v1alpha1.GateCriterion{
				{Metric: "roc_auc", Minimum: ptr.To(0.8)},
				{Metric: "log_loss", Maximum: ptr.To(0.5)},
				{Metric: "accuracy", Segment: "*", MaxRegression: ptr.To(0.01)},
			},
		},
		Guard: &v1alpha1.GuardSpec{Query: `larkspur_late_risk_auc`, Below: ptr.To(0.75), ForSeconds: 600, EverySeconds: 60, ProbationSeconds: 86400},
	}
}

func TestLineValid(t *testing.T) {
	spec := validSpec()
	if ps := Line(&spec); len(ps) != 0 {
		t.Fatalf("valid spec reported problems: %s", Join(ps))
	}
	// A minimal line (serving and gate only) is valid too.
	minimal := v1alpha1.ModelLineSpec{
		Serving: v1alpha1.ServingSpec{DeploymentName: "d", ContainerName: "c"},
		Gate:    v1alpha1.GateSpec{JobTemplate: job("e"), Criteria: []v1alpha1.GateCriterion{{Metric: "accuracy", Minimum: ptr.To(0.5)}}},
	}
	if ps := Line(&minimal); len(ps) != 0 {
		t.Fatalf("minimal spec reported problems: %s", Join(ps))
	}
}

func TestLineProblems(t *testing.T) {
	cases := []struct {
		name      string
		mutate    func(*v1alpha1.ModelLineSpec)
		wantField string
		wantText  string
	}{
		{"cron with six fields", func(s *v1alpha1.ModelLineSpec) { s.Schedule.Cron = "0 0 3 * * 1" }, "spec.schedule.cron", "not a 5-field cron expression"},
		{"cron nonsense", func(s *v1alpha1.ModelLineSpec) { s.Schedule.Cron = "every monday" }, "spec.schedule.cron", "not a 5-field cron expression"},
		{"cron minute out of range", func(s *v1alpha1.ModelLineSpec) { s.Schedule.Cron = "61 3 * * *" }, "spec.schedule.cron", "not a 5-field cron expression"},
		{"cron with zone prefix", func(s *v1alpha1.ModelLineSpec) { s.Schedule.Cron = "CRON_TZ=UTC 0 3 * * *" }, "spec.schedule.cron", "spec.schedule.timeZone"},
		{"unknown time zone", func(s *v1alpha1.ModelLineSpec) { s.Schedule.TimeZone = "Larkspur/Depot" }, "spec.schedule.timeZone", "not an IANA time zone"},
		{"Local time zone", func(s *v1alpha1.ModelLineSpec) { s.Schedule.TimeZone = "Local" }, "spec.schedule.timeZone", "controller host's zone"},
		{"trigger PromQL syntax", func(s *v1alpha1.ModelLineSpec) { s.Triggers[0].Query = "avg_over_time(auc[1h]" }, "spec.triggers[0].query", "PromQL does not parse"},
		{"trigger range vector", func(s *v1alpha1.ModelLineSpec) { s.Triggers[0].Query = "auc[1h]" }, "spec.triggers[0].query", "yields a range vector"},
		{"trigger string literal", func(s *v1alpha1.ModelLineSpec) { s.Triggers[0].Query = `"auc"` }, "spec.triggers[0].query", "yields a string"},
		{"data quality PromQL", func(s *v1alpha1.ModelLineSpec) { s.Checks.DataQuality[0].Query = "sum by (" }, "spec.checks.dataQuality[0].query", "PromQL does not parse"},
		{"drift PromQL", func(s *v1alpha1.ModelLineSpec) { s.Checks.Drift[0].Query = "max(" }, "spec.checks.drift[0].query", "PromQL does not parse"},
		{"fresh data PromQL", func(s *v1alpha1.ModelLineSpec) { s.Checks.FreshData.Query = "rows{" }, "spec.checks.freshData.query", "PromQL does not parse"},
		{"guard PromQL", func(s *v1alpha1.ModelLineSpec) { s.Guard.Query = "1 +" }, "spec.guard.query", "PromQL does not parse"},
		{"trigger label count PromQL", func(s *v1alpha1.ModelLineSpec) {
			s.Triggers[0].EnoughLabels = &v1alpha1.LabelCount{Query: "sum(labelled{", AtLeast: 100}
		}, "spec.triggers[0].enoughLabels.query", "PromQL does not parse"},
		{"guard label count template", func(s *v1alpha1.ModelLineSpec) {
			s.Guard.EnoughLabels = &v1alpha1.LabelCount{Query: `sum(labelled{version="{{.Model}}"})`, AtLeast: 100}
		}, "spec.guard.enoughLabels.query", "does not render"},
		{"trigger template syntax", func(s *v1alpha1.ModelLineSpec) { s.Triggers[0].Query = `auc{line="{{.Line}"}` }, "spec.triggers[0].query", "the query template does not parse"},
		{"trigger template field", func(s *v1alpha1.ModelLineSpec) { s.Triggers[0].Query = `auc{model="{{.Model}}"}` }, "spec.triggers[0].query", "does not render (it may use {{.Line}}, {{.Namespace}} and {{.Version}})"},
		{"check template to bad PromQL", func(s *v1alpha1.ModelLineSpec) { s.Checks.Drift[0].Query = `psi{line={{.Line}}}` }, "spec.checks.drift[0].query", "the template renders to PromQL that does not parse"},
		{"guard template to a range vector", func(s *v1alpha1.ModelLineSpec) { s.Guard.Query = `auc{version="{{.Version}}"}[5m]` }, "spec.guard.query", "the template renders to PromQL that yields a range vector"},
		{"artifact template syntax", func(s *v1alpha1.ModelLineSpec) { s.Training.ArtifactURI = "s3://m/{{.Line}/x" }, "spec.training.artifactURI", "does not parse"},
		{"artifact template unknown field", func(s *v1alpha1.ModelLineSpec) { s.Training.ArtifactURI = "s3://m/{{.Model}}/{{.Number}}" }, "spec.training.artifactURI", "template fails"},
		{"artifact template constant", func(s *v1alpha1.ModelLineSpec) { s.Training.ArtifactURI = "s3://m/{{.Line}}/latest" }, "spec.training.artifactURI", "same URI"},
		{"artifact template empty render", func(s *v1alpha1.ModelLineSpec) { s.Training.ArtifactURI = "{{if false}}x{{end}}" }, "spec.training.artifactURI", "empty URI"},
		{"training restart Always", func(s *v1alpha1.ModelLineSpec) {
			s.Training.JobTemplate.Spec.Template.Spec.RestartPolicy = corev1.RestartPolicyAlways
		}, "spec.training.jobTemplate.spec.template.spec.restartPolicy", "use Never or OnFailure"},
		{"gate without containers", func(s *v1alpha1.ModelLineSpec) { s.Gate.JobTemplate = job() }, "spec.gate.jobTemplate.spec.template.spec.containers", "at least one container"},
		{"check job duplicate container", func(s *v1alpha1.ModelLineSpec) { s.Checks.JobTemplate = ptr.To(job("a", "a")) }, "spec.checks.jobTemplate.spec.template.spec.containers[1].name", "used twice"},
		{"minimum where lower is better", func(s *v1alpha1.ModelLineSpec) { s.Gate.Criteria[1].Minimum = ptr.To(0.1) }, "spec.gate.criteria[1].minimum", "use maximum"},
		{"maximum on higher-is-better", func(s *v1alpha1.ModelLineSpec) { s.Gate.Criteria[0].Maximum = ptr.To(0.99) }, "spec.gate.criteria[0].maximum", "use minimum"},
		{"maximum on own metric said higher", func(s *v1alpha1.ModelLineSpec) {
			s.Gate.Criteria = append(s.Gate.Criteria, v1alpha1.GateCriterion{Metric: "on_time_share", Better: v1alpha1.HigherBetter, Maximum: ptr.To(1.0)})
		}, "spec.gate.criteria[3].maximum", "use minimum"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			spec := validSpec()
			tc.mutate(&spec)
			ps := Line(&spec)
			if len(ps) != 1 {
				t.Fatalf("want exactly one problem, got %d: %s", len(ps), Join(ps))
			}
			if ps[0].Field != tc.wantField {
				t.Errorf("field = %q, want %q", ps[0].Field, tc.wantField)
			}
			if !strings.Contains(ps[0].Message, tc.wantText) {
				t.Errorf("message %q does not contain %q", ps[0].Message, tc.wantText)
			}
		})
	}
}

func TestLineReportsEveryProblem(t *testing.T) {
	spec := validSpec()
	spec.Schedule.Cron = "bad"
	spec.Guard.Query = "("
	ps := Line(&spec)
	if len(ps) != 2 || ps[0].Field != "spec.schedule.cron" || ps[1].Field != "spec.guard.query" {
		t.Fatalf("want cron then guard problems, got %s", Join(ps))
	}
	if msg := Join(ps); !strings.Contains(msg, "; spec.guard.query: ") {
		t.Errorf("joined message %q does not separate problems", msg)
	}
}

func TestCronDescriptorsAccepted(t *testing.T) {
	for _, expr := range []string{"@daily", "@weekly", "*/15 * * * *", "0 3 * * MON-FRI", "0 0 1 * *"} {
		if _, err := CronParser.Parse(expr); err != nil {
			t.Errorf("%q: %v", expr, err)
		}
	}
}

func TestRenderArtifactURI(t *testing.T) {
	got, err := RenderArtifactURI("s3://larkspur-models/{{.Line}}/{{.Version}}-{{.Number}}", ArtifactData{Line: "late-risk", Version: "late-risk-v7", Number: 7})
	if err != nil {
		t.Fatal(err)
	}
	if want := "s3://larkspur-models/late-risk/late-risk-v7-7"; got != want {
		t.Errorf("got %q, want %q", got, want)
	}
	if _, err := RenderArtifactURI("{{.Nope}}", ArtifactData{}); err == nil || !strings.Contains(err.Error(), "spec.training.artifactURI") {
		t.Errorf("unknown field: error %v should name the field", err)
	}
}

func TestLocation(t *testing.T) {
	loc, err := Location("")
	if err != nil || loc.String() != "UTC" {
		t.Errorf("empty zone: got %v, %v; want UTC", loc, err)
	}
	loc, err = Location("Asia/Kolkata")
	if err != nil || loc.String() != "Asia/Kolkata" {
		t.Errorf("Asia/Kolkata: got %v, %v", loc, err)
	}
}

// A query template renders with the line's name, namespace and version;
// a query without one is left as it is, braces of PromQL included.
func TestRenderQuery(t *testing.T) {
	d := QueryData{Line: "late-risk", Namespace: "larkspur", Version: "late-risk-v3"}
	for query, want := range map[string]string{
		`avg(auc{namespace="{{.Namespace}}", line="{{.Line}}", version="{{.Version}}"})`: `avg(auc{namespace="larkspur", line="late-risk", version="late-risk-v3"})`,
		`avg(auc{job="scorer"})`: `avg(auc{job="scorer"})`,
	} {
		got, err := RenderQuery(query, d)
		if err != nil || got != want {
			t.Errorf("RenderQuery(%q) = %q, %v; want %q", query, got, err, want)
		}
	}
	if _, err := RenderQuery(`auc{x="{{.Nope}}"}`, d); err == nil || !strings.Contains(err.Error(), "{{.Version}}") {
		t.Errorf("an unknown field: %v", err)
	}
	// A well-formed template passes the spec check.
	spec := validSpec()
	spec.Triggers[0].Query = `avg(auc{line="{{.Line}}", version="{{.Version}}"})`
	spec.Guard.Query = `avg(auc{namespace="{{.Namespace}}", version="{{.Version}}"})`
	if ps := Line(&spec); len(ps) != 0 {
		t.Errorf("templated queries: %v", ps)
	}
}

func TestUsesVersion(t *testing.T) {
	cases := map[string]bool{
		`late_share{line="{{.Line}}", version="{{.Version}}"}`:     true,
		`late_share{model_version=~"{{ .Version }}.*"}`:            true,
		`late_share{line="{{.Line}}", namespace="{{.Namespace}}"}`: false,
		`late_share{version="late-risk-v2"}`:                       false, // a literal: not the version on probation
		`late_share{version="{{.Verison}}"}`:                       false, // does not render
		`{{if false}}{{.Version}}{{end}}late_share`:                false, // never rendered
	}
	for q, want := range cases {
		if got := UsesVersion(q); got != want {
			t.Errorf("UsesVersion(%q) = %v, want %v", q, got, want)
		}
	}
}
