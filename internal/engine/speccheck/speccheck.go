// Package speccheck judges the parts of a ModelLine spec that the API server's
// CEL rules cannot: cron syntax, IANA time zones, PromQL syntax, the artifact
// URI template, Job template settings and which way a metric is better. Each problem
// names the field and what to do about it.
package speccheck

import (
	"bytes"
	"fmt"
	"strings"
	"sync"
	"text/template"
	"time"

	"github.com/prometheus/prometheus/promql/parser"
	"github.com/robfig/cron/v3"
	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// Problem is one thing wrong with a spec.
type Problem struct {
	// Field is the path of the field, as kubectl explain writes it, for
	// example spec.triggers[0].query.
	Field string
	// Message says what is wrong and how to fix it.
	Message string
}

func (p Problem) String() string { return p.Field + ": " + p.Message }

// Join renders problems as one message for a condition or an event.
func Join(problems []Problem) string {
	parts := make([]string, len(problems))
	for i, p := range problems {
		parts[i] = p.String()
	}
	return strings.Join(parts, "; ")
}

// CronParser is the parser the controller uses for schedules: the standard
// five fields plus descriptors such as @daily, as the built-in CronJob reads
// them.
var CronParser = cron.NewParser(cron.Minute | cron.Hour | cron.Dom | cron.Month | cron.Dow | cron.Descriptor)

// promqlParser accepts what a stock Prometheus server accepts.
var promqlParser = parser.NewParser(parser.Options{})

// ArtifactData is what the training artifact URI template can use.
type ArtifactData struct {
	// Line is the ModelLine's name.
	Line string
	// Version is the ModelVersion's name.
	Version string
	// Number is the version's sequence number within its line.
	Number int32
}

// Line returns every problem the API server could not catch in a ModelLine
// spec, in field order. No problems means the spec is valid.
func Line(spec *v1alpha1.ModelLineSpec) []Problem {
	var ps []Problem
	if s := spec.Schedule; s != nil {
		ps = append(ps, schedule(s)...)
	}
	if t := spec.Training; t != nil {
		ps = append(ps, artifactTemplate("spec.training.artifactURI", t.ArtifactURI)...)
		ps = append(ps, jobTemplate("spec.training.jobTemplate", &t.JobTemplate)...)
	}
	for i, tr := range spec.Triggers {
		ps = append(ps, promQL(fmt.Sprintf("spec.triggers[%d].query", i), tr.Query)...)
		if e := tr.EnoughLabels; e != nil {
			ps = append(ps, promQL(fmt.Sprintf("spec.triggers[%d].enoughLabels.query", i), e.Query)...)
		}
	}
	if c := spec.Checks; c != nil {
		for i, q := range c.DataQuality {
			ps = append(ps, promQL(fmt.Sprintf("spec.checks.dataQuality[%d].query", i), q.Query)...)
		}
		for i, q := range c.Drift {
			ps = append(ps, promQL(fmt.Sprintf("spec.checks.drift[%d].query", i), q.Query)...)
		}
		if f := c.FreshData; f != nil && f.Query != "" {
			ps = append(ps, promQL("spec.checks.freshData.query", f.Query)...)
		}
		if c.JobTemplate != nil {
			ps = append(ps, jobTemplate("spec.checks.jobTemplate", c.JobTemplate)...)
		}
	}
	ps = append(ps, jobTemplate("spec.gate.jobTemplate", &spec.Gate.JobTemplate)...)
	for i, c := range spec.Gate.Criteria {
		ps = append(ps, criterion(fmt.Sprintf("spec.gate.criteria[%d]", i), c)...)
	}
	if g := spec.Guard; g != nil {
		ps = append(ps, promQL("spec.guard.query", g.Query)...)
		if e := g.EnoughLabels; e != nil {
			ps = append(ps, promQL("spec.guard.enoughLabels.query", e.Query)...)
		}
	}
	return ps
}

// Location returns the time zone a schedule is read in; empty means UTC.
func Location(tz string) (*time.Location, error) {
	if tz == "" {
		return time.UTC, nil
	}
	if tz == "Local" {
		return nil, fmt.Errorf("%q is the controller host's zone, not a fixed one: name an IANA zone such as Europe/London", tz)
	}
	loc, err := time.LoadLocation(tz)
	if err != nil {
		return nil, fmt.Errorf("%q is not an IANA time zone (for example Europe/London or America/New_York)", tz)
	}
	return loc, nil
}

func schedule(s *v1alpha1.ScheduleSpec) []Problem {
	var ps []Problem
	expr := strings.TrimSpace(s.Cron)
	if strings.HasPrefix(expr, "TZ=") || strings.HasPrefix(expr, "CRON_TZ=") {
		ps = append(ps, Problem{"spec.schedule.cron", "a time zone prefix is not allowed in the expression: put the zone in spec.schedule.timeZone"})
	} else if _, err := CronParser.Parse(expr); err != nil {
		ps = append(ps, Problem{"spec.schedule.cron", fmt.Sprintf("%q is not a 5-field cron expression (minute hour day-of-month month day-of-week, for example \"0 3 * * 1\"): %v", s.Cron, err)})
	}
	if _, err := Location(s.TimeZone); err != nil {
		ps = append(ps, Problem{"spec.schedule.timeZone", err.Error()})
	}
	return ps
}

// QueryData is what a trigger, check or guard query may use as a
// template: {{.Line}}, {{.Namespace}} and {{.Version}}.
type QueryData struct {
	// Line is the ModelLine's name.
	Line string
	// Namespace is the ModelLine's namespace.
	Namespace string
	// Version is the version judged: the live version for triggers and
	// checks, the version on probation (the live one) for the guard; empty
	// when nothing is live.
	Version string
}

// queryFields says what a query template may use, for the messages.
const queryFields = "it may use {{.Line}}, {{.Namespace}} and {{.Version}}"

// IsTemplate reports whether a query is a template (holds "{{").
func IsTemplate(query string) bool { return strings.Contains(query, "{{") }

// parsedTemplates keeps parsed query templates by their text: a fleet
// renders a few templates for every line at every evaluation. It is
// emptied when it reaches maxParsedTemplates (texts edited away leave it
// only then).
var parsedTemplates struct {
	sync.Mutex
	m map[string]*template.Template
}

const maxParsedTemplates = 4096

func parseTemplate(query string) (*template.Template, error) {
	parsedTemplates.Lock()
	t := parsedTemplates.m[query]
	parsedTemplates.Unlock()
	if t != nil {
		return t, nil
	}
	t, err := template.New("query").Option("missingkey=error").Parse(query)
	if err != nil {
		return nil, err
	}
	parsedTemplates.Lock()
	if parsedTemplates.m == nil || len(parsedTemplates.m) >= maxParsedTemplates {
		parsedTemplates.m = map[string]*template.Template{}
	}
	parsedTemplates.m[query] = t
	parsedTemplates.Unlock()
	return t, nil
}

// RenderQuery renders a trigger, check or guard query for a line: a query
// without "{{" is PromQL as it is; one with it is a Go template of
// QueryData.
func RenderQuery(query string, d QueryData) (string, error) {
	if !IsTemplate(query) {
		return query, nil
	}
	tmpl, err := parseTemplate(query)
	if err != nil {
		return "", fmt.Errorf("the query template does not parse: %w", err)
	}
	var out bytes.Buffer
	if err := tmpl.Execute(&out, d); err != nil {
		return "", fmt.Errorf("the query template does not render (%s): %w", queryFields, err)
	}
	return out.String(), nil
}

// UsesVersion says a query's text depends on {{.Version}}: it renders
// differently for two versions of the same line. A query that does not
// render says no.
func UsesVersion(query string) bool {
	if !IsTemplate(query) {
		return false
	}
	a, errA := RenderQuery(query, QueryData{Line: "l", Namespace: "n", Version: "version-a"})
	b, errB := RenderQuery(query, QueryData{Line: "l", Namespace: "n", Version: "version-b"})
	return errA == nil && errB == nil && a != b
}

// promQL checks that a query (a template rendered with example values)
// parses and yields an instant vector or a scalar, which is what a range
// query over a window can evaluate.
func promQL(field, query string) []Problem {
	rendered, err := RenderQuery(query, QueryData{Line: "late-risk", Namespace: "larkspur", Version: "late-risk-v1"})
	if err != nil {
		return []Problem{{field, err.Error()}}
	}
	what := "PromQL"
	if rendered != query {
		what = "the template renders to PromQL that"
	}
	expr, err := promqlParser.ParseExpr(rendered)
	if err != nil {
		return []Problem{{field, fmt.Sprintf("%s does not parse: %v", what, err)}}
	}
	switch expr.Type() {
	case parser.ValueTypeVector, parser.ValueTypeScalar:
		return nil
	case parser.ValueTypeMatrix:
		return []Problem{{field, what + " yields a range vector; it must yield an instant vector or a scalar (wrap the range selector in a function such as avg_over_time)"}}
	default:
		return []Problem{{field, fmt.Sprintf("%s yields a %s; it must yield an instant vector or a scalar", what, expr.Type())}}
	}
}

// artifactTemplate checks the training artifact URI template: it parses, uses
// only the fields plumbline fills, and names each version's artifact apart, so
// a retrain never overwrites the artifact that is serving.
func artifactTemplate(field, text string) []Problem {
	tmpl, err := template.New("artifactURI").Option("missingkey=error").Parse(text)
	if err != nil {
		return []Problem{{field, fmt.Sprintf("template does not parse: %v", err)}}
	}
	var a, b bytes.Buffer
	if err := tmpl.Execute(&a, ArtifactData{Line: "line", Version: "line-v1", Number: 1}); err != nil {
		return []Problem{{field, fmt.Sprintf("template fails: %v (it may use {{.Line}}, {{.Version}} and {{.Number}})", err)}}
	}
	if err := tmpl.Execute(&b, ArtifactData{Line: "line", Version: "line-v2", Number: 2}); err != nil {
		return []Problem{{field, fmt.Sprintf("template fails: %v (it may use {{.Line}}, {{.Version}} and {{.Number}})", err)}}
	}
	if strings.TrimSpace(a.String()) == "" {
		return []Problem{{field, "template renders an empty URI"}}
	}
	if a.String() == b.String() {
		return []Problem{{field, "template gives every version the same URI, so a retrain would overwrite the serving artifact: include {{.Version}} or {{.Number}}"}}
	}
	return nil
}

// RenderArtifactURI renders the training artifact URI template.
func RenderArtifactURI(text string, data ArtifactData) (string, error) {
	tmpl, err := template.New("artifactURI").Option("missingkey=error").Parse(text)
	if err != nil {
		return "", fmt.Errorf("parse spec.training.artifactURI: %w", err)
	}
	var out bytes.Buffer
	if err := tmpl.Execute(&out, data); err != nil {
		return "", fmt.Errorf("render spec.training.artifactURI: %w", err)
	}
	return out.String(), nil
}

// jobTemplate checks what a Job needs and the CRD schema cannot require.
func jobTemplate(field string, jt *batchv1.JobTemplateSpec) []Problem {
	var ps []Problem
	pod := jt.Spec.Template.Spec
	if len(pod.Containers) == 0 {
		ps = append(ps, Problem{field + ".spec.template.spec.containers", "a Job needs at least one container"})
	}
	switch pod.RestartPolicy {
	case "", corev1.RestartPolicyNever, corev1.RestartPolicyOnFailure:
	default:
		ps = append(ps, Problem{field + ".spec.template.spec.restartPolicy", fmt.Sprintf("%q is not allowed for a Job: use Never or OnFailure", pod.RestartPolicy)})
	}
	seen := map[string]bool{}
	for i, c := range pod.Containers {
		if seen[c.Name] {
			ps = append(ps, Problem{fmt.Sprintf("%s.spec.template.spec.containers[%d].name", field, i), fmt.Sprintf("%q is used twice: container names must be unique", c.Name)})
		}
		seen[c.Name] = true
	}
	return ps
}

// criterion checks that the bound a criterion sets suits which way is
// better for the metric: a minimum where higher is better, a maximum where
// lower is better.
func criterion(field string, c v1alpha1.GateCriterion) []Problem {
	var ps []Problem
	switch c.EffectiveBetter() {
	case v1alpha1.LowerBetter:
		if c.Minimum != nil {
			ps = append(ps, Problem{field + ".minimum", fmt.Sprintf("%s is better when lower, so a minimum does not guard it: use maximum", c.Metric)})
		}
	default:
		if c.Maximum != nil {
			ps = append(ps, Problem{field + ".maximum", fmt.Sprintf("%s is better when higher, so a maximum does not guard it: use minimum", c.Metric)})
		}
	}
	return ps
}
