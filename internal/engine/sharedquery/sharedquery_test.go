package sharedquery

import (
	"strings"
	"testing"

	"plumbline.dev/plumbline/internal/engine/promq"
	"plumbline.dev/plumbline/internal/engine/speccheck"
)

func TestAnalyzeShares(t *testing.T) {
	cases := []struct {
		tmpl, query string
		strip       []string
	}{
		{`larkspur_auc{line="{{.Line}}"}`, `larkspur_auc{line!=""}`, nil},
		{`avg(larkspur_auc{line="{{.Line}}"})`, `avg by (line) (larkspur_auc{line!=""})`, []string{"line"}},
		{`avg by (depot) (larkspur_auc{namespace="{{.Namespace}}",line="{{.Line}}"})`,
			`avg by (depot, line, namespace) (larkspur_auc{line!="",namespace!=""})`, []string{"line", "namespace"}},
		{`avg without (pod) (rate(errors_total{model="{{.Line}}"}[5m]))`,
			`avg without (pod) (rate(errors_total{model!=""}[5m]))`, nil},
		{`sum(rate(late_total{line="{{.Line}}"}[10m])) / sum(rate(parcels_total{line="{{.Line}}"}[10m]))`,
			`sum by (line) (rate(late_total{line!=""}[10m])) / sum by (line) (rate(parcels_total{line!=""}[10m]))`, []string{"line"}},
		{`avg(larkspur_auc{version="{{.Version}}"}) < bool 0.7`, `avg by (version) (larkspur_auc{version!=""}) < bool 0.7`, []string{"version"}},
		{`a{line="{{.Line}}"} / on (depot) b{line="{{.Line}}"}`, `a{line!=""} / on (depot, line) b{line!=""}`, []string{"line"}},
		{`a{line="{{.Line}}"} / ignoring (line, pod) b{line="{{.Line}}"}`, `a{line!=""} / ignoring (pod) b{line!=""}`, []string{"line"}},
		{`a{line="{{.Line}}"} / on (depot) group_left b{line="{{.Line}}"}`, `a{line!=""} / on (depot, line) group_left () b{line!=""}`, nil},
		{`topk(1, a{line="{{.Line}}"})`, `topk by (line) (1, a{line!=""})`, nil},
		{`histogram_quantile(0.9, sum by (le) (rate(lat_bucket{line="{{.Line}}"}[5m])))`,
			`histogram_quantile(0.9, sum by (le, line) (rate(lat_bucket{line!=""}[5m])))`, []string{"line"}},
		{`max_over_time(avg(a{line="{{.Line}}"})[30m:1m])`, `max_over_time(avg by (line) (a{line!=""})[30m:1m])`, []string{"line"}},
	}
	for _, c := range cases {
		p, err := Analyze(c.tmpl)
		if err != nil {
			t.Errorf("%s: %v", c.tmpl, err)
			continue
		}
		if p.Query != c.query {
			t.Errorf("%s:\n got  %s\n want %s", c.tmpl, p.Query, c.query)
		}
		if strings.Join(p.strip, ",") != strings.Join(c.strip, ",") {
			t.Errorf("%s: strips %v, want %v", c.tmpl, p.strip, c.strip)
		}
	}
}

func TestAnalyzeRefuses(t *testing.T) {
	cases := []struct{ tmpl, why string }{
		{`larkspur_auc`, "uses no placeholder"},
		{`a{line=~"{{.Line}}"}`, "whole value of an equality matcher"},
		{`a{line="{{.Line}}-x"}`, "whole value of an equality matcher"},
		{`a_{{.Line}}`, "not the whole value"},
		{`{{if eq .Line "a"}}a{{else}}b{{end}}{line="x"}`, "bare placeholder"},
		{`a{line="{{.Line | printf "%s"}}"}`, "bare placeholder"},
		{`a{line="{{.Line}}"} / b`, "does not match every placeholder"},
		{`absent(a{line="{{.Line}}"})`, "absent() does not keep labels"},
		{`label_replace(a{line="{{.Line}}"}, "x", "$1", "line", "(.*)")`, "label_replace()"},
		{`sum without (line) (a{line="{{.Line}}"})`, "drops line"},
		{`count_values("v", a{line="{{.Line}}"})`, "count_values"},
		{`a{line="{{.Line}}"} / sum(b{line="{{.Line}}"})`, "keep different placeholder labels"},
		{`a{line="{{.Line}}", model="{{.Line}}"}`, "matches two labels"},
		{`a{line="{{.Line}}", line="{{.Version}}"}`, "matches both"},
		{`topk(scalar(b{line="{{.Line}}"}), a{line="{{.Line}}"})`, "not a number"},
	}
	for _, c := range cases {
		_, err := Analyze(c.tmpl)
		if err == nil || !strings.Contains(err.Error(), c.why) {
			t.Errorf("%s: err %v, want one saying %q", c.tmpl, err, c.why)
		}
	}
}

func TestSplit(t *testing.T) {
	p, err := Analyze(`avg by (depot) (auc{namespace="{{.Namespace}}",line="{{.Line}}"})`)
	if err != nil {
		t.Fatal(err)
	}
	pts := []promq.Point{{V: 1}}
	answer := []promq.Series{
		{Metric: map[string]string{"line": "late-risk", "namespace": "larkspur", "depot": "fenwick"}, Points: pts},
		{Metric: map[string]string{"line": "late-risk", "namespace": "larkspur", "depot": "alder"}, Points: pts},
		{Metric: map[string]string{"line": "late-risk", "namespace": "other", "depot": "alder"}, Points: pts},
	}
	got, err := p.Split(answer)
	if err != nil {
		t.Fatal(err)
	}
	key, ok := p.Key(speccheck.QueryData{Line: "late-risk", Namespace: "larkspur"})
	if !ok {
		t.Fatal("no key")
	}
	mine := got[key]
	if len(mine) != 2 || mine[0].Labels != `{depot="alder"}` || mine[1].Labels != `{depot="fenwick"}` {
		t.Fatalf("the line's part is %+v, want its two depots without line and namespace, sorted", mine)
	}
	if len(got) != 2 {
		t.Fatalf("%d parts, want 2 (one per namespace)", len(got))
	}
	if _, ok := p.Key(speccheck.QueryData{Line: "late-risk"}); ok {
		t.Fatal("an empty namespace must not have a shared part")
	}
	if _, err := p.Split([]promq.Series{{Labels: "{}"}}); err == nil {
		t.Fatal("an answer without label maps must not split")
	}
}
