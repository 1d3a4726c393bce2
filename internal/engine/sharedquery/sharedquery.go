// Package sharedquery answers many lines' templated queries with one query.
//
// Lines whose trigger (or guard) query comes from the same template text
// differ only in the values the placeholders take. When every placeholder is
// the whole value of an equality label matcher (line="{{.Line}}"), the
// lines' queries select disjoint sets of series that the matched label tells
// apart, so one query that selects all of them (line!="") and keeps that
// label through every aggregation and vector match can be split by it into
// exactly the answers the lines' own queries would give.
//
// A template can be shared when all of these hold (Analyze says which fails):
//   - its placeholders are bare: {{.Line}}, {{.Namespace}}, {{.Version}},
//     no pipelines, conditions or functions;
//   - each placeholder is, wherever it appears, the whole value of an
//     equality matcher on one label (each placeholder its own label, not
//     __name__), and appears nowhere else;
//   - every vector selector carries a matcher for every placeholder used;
//   - its functions keep labels point by point (rate, increase, the
//     *_over_time family, abs, clamp, histogram_quantile and the like; not
//     absent, scalar, vector, time or label_replace), their other arguments
//     are numbers;
//   - its aggregations are sum, avg, min, max, count, group, stddev,
//     stdvar, quantile, topk or bottomk, and a without() names no
//     placeholder's label;
//   - both sides of a binary operation between vectors keep the same
//     placeholder labels.
//
// The shared query adds the placeholders' labels to every by() and on(),
// takes them out of every ignoring(), and selects them with label!="". Its
// answer is split by their values; a label a line's own query would not
// have returned is dropped again. Everything else goes per line.
package sharedquery

import (
	"errors"
	"fmt"
	"slices"
	"sort"
	"strings"
	"text/template"
	"text/template/parse"

	"github.com/prometheus/prometheus/model/labels"
	"github.com/prometheus/prometheus/promql/parser"

	"plumbline.dev/plumbline/internal/engine/promq"
	"plumbline.dev/plumbline/internal/engine/speccheck"
)

// fields are the placeholders in a fixed order.
var fields = []string{"Line", "Namespace", "Version"}

const sentinel = "plumbline0sharedquery0"

func sentinelOf(field string) string { return sentinel + field }

// Plan is a template that can be shared: the one query that answers all
// lines using it, and how to split its answer.
type Plan struct {
	// Query is the shared query.
	Query string
	// used are the placeholders the template uses, in fields order, and
	// label the label each one matches.
	used  []string
	label map[string]string
	// strip are the labels a line's own query would not return.
	strip []string
}

// Analyze returns the plan of a template that can be shared, or an error
// saying why it cannot (the query then goes per line). A query without
// placeholders is not a template and cannot be shared.
func Analyze(tmpl string) (*Plan, error) {
	rendered, used, err := renderSentinels(tmpl)
	if err != nil {
		return nil, err
	}
	if len(used) == 0 {
		return nil, errors.New("the query uses no placeholder")
	}
	expr, err := parser.NewParser(parser.Options{}).ParseExpr(rendered)
	if err != nil {
		return nil, fmt.Errorf("the rendered template does not parse: %w", err)
	}
	a := &analysis{used: used, label: map[string]string{}}
	kept, err := a.rewrite(expr)
	if err != nil {
		return nil, err
	}
	if len(a.label) != len(used) {
		for _, f := range used {
			if a.label[f] == "" {
				return nil, fmt.Errorf("{{.%s}} is not the value of a label matcher", f)
			}
		}
	}
	query := expr.String()
	if strings.Contains(query, sentinel) {
		return nil, errors.New("a placeholder appears outside an equality label matcher")
	}
	p := &Plan{Query: query, label: a.label}
	for _, f := range fields {
		if slices.Contains(used, f) {
			p.used = append(p.used, f)
			if !kept.has(a.label[f]) {
				p.strip = append(p.strip, a.label[f])
			}
		}
	}
	return p, nil
}

// renderSentinels renders a template whose actions are bare placeholders,
// each with a value no real name has.
func renderSentinels(tmpl string) (string, []string, error) {
	t, err := template.New("query").Parse(tmpl)
	if err != nil {
		return "", nil, fmt.Errorf("the template does not parse: %w", err)
	}
	var out strings.Builder
	var used []string
	for _, n := range t.Tree.Root.Nodes {
		switch n := n.(type) {
		case *parse.TextNode:
			out.Write(n.Text)
		case *parse.ActionNode:
			f, ok := bareField(n)
			if !ok {
				return "", nil, fmt.Errorf("%s is not a bare placeholder ({{.Line}}, {{.Namespace}} or {{.Version}})", n)
			}
			if !slices.Contains(used, f) {
				used = append(used, f)
			}
			out.WriteString(sentinelOf(f))
		default:
			return "", nil, fmt.Errorf("%s is not a bare placeholder ({{.Line}}, {{.Namespace}} or {{.Version}})", n)
		}
	}
	return out.String(), used, nil
}

func bareField(n *parse.ActionNode) (string, bool) {
	if n.Pipe == nil || len(n.Pipe.Decl) > 0 || len(n.Pipe.Cmds) != 1 || len(n.Pipe.Cmds[0].Args) != 1 {
		return "", false
	}
	fn, ok := n.Pipe.Cmds[0].Args[0].(*parse.FieldNode)
	if !ok || len(fn.Ident) != 1 || !slices.Contains(fields, fn.Ident[0]) {
		return "", false
	}
	return fn.Ident[0], true
}

// labelSet is a small set of label names.
type labelSet []string

func (s labelSet) has(l string) bool { return slices.Contains(s, l) }

func (s labelSet) equal(o labelSet) bool {
	a, b := slices.Clone(s), slices.Clone(o)
	slices.Sort(a)
	slices.Sort(b)
	return slices.Equal(a, b)
}

type analysis struct {
	used  []string
	label map[string]string // placeholder -> label
}

func (a *analysis) groupLabels() []string {
	out := make([]string, 0, len(a.label))
	for _, f := range fields {
		if l, ok := a.label[f]; ok {
			out = append(out, l)
		}
	}
	return out
}

// shareableFuncs keep every label but the metric name, point by point.
var shareableFuncs = map[string]bool{
	"abs": true, "ceil": true, "floor": true, "exp": true, "ln": true, "log2": true, "log10": true,
	"sqrt": true, "sgn": true, "round": true, "clamp": true, "clamp_min": true, "clamp_max": true,
	"rate": true, "irate": true, "increase": true, "delta": true, "idelta": true, "deriv": true,
	"predict_linear": true, "resets": true, "changes": true, "timestamp": true, "sort": true, "sort_desc": true,
	"avg_over_time": true, "min_over_time": true, "max_over_time": true, "sum_over_time": true,
	"count_over_time": true, "quantile_over_time": true, "stddev_over_time": true, "stdvar_over_time": true,
	"last_over_time": true, "present_over_time": true, "histogram_quantile": true,
}

// shareableAggs are the aggregations a by() over the placeholders' labels
// splits without changing any group.
var shareableAggs = map[parser.ItemType]bool{
	parser.SUM: true, parser.AVG: true, parser.MIN: true, parser.MAX: true, parser.COUNT: true,
	parser.GROUP: true, parser.STDDEV: true, parser.STDVAR: true, parser.QUANTILE: true,
	parser.TOPK: true, parser.BOTTOMK: true,
}

// rewrite turns the rendered template into the shared query in place, and
// returns the placeholders' labels the line's own query keeps at e.
func (a *analysis) rewrite(e parser.Expr) (labelSet, error) {
	switch e := e.(type) {
	case *parser.NumberLiteral:
		return nil, nil
	case *parser.ParenExpr:
		return a.rewrite(e.Expr)
	case *parser.UnaryExpr:
		return a.rewrite(e.Expr)
	case *parser.VectorSelector:
		return a.selector(e)
	case *parser.MatrixSelector:
		return a.rewrite(e.VectorSelector)
	case *parser.SubqueryExpr:
		return a.rewrite(e.Expr)
	case *parser.Call:
		return a.call(e)
	case *parser.AggregateExpr:
		return a.aggregate(e)
	case *parser.BinaryExpr:
		return a.binary(e)
	}
	return nil, fmt.Errorf("%s cannot be shared", e)
}

func (a *analysis) selector(vs *parser.VectorSelector) (labelSet, error) {
	var kept labelSet
	for i, m := range vs.LabelMatchers {
		if !strings.Contains(m.Value, sentinel) && !strings.Contains(m.Name, sentinel) {
			continue
		}
		f := strings.TrimPrefix(m.Value, sentinel)
		if m.Type != labels.MatchEqual || !strings.HasPrefix(m.Value, sentinel) || !slices.Contains(fields, f) {
			return nil, fmt.Errorf("in %s a placeholder is not the whole value of an equality matcher (label=\"{{.Line}}\")", vs)
		}
		if m.Name == labels.MetricName {
			return nil, fmt.Errorf("in %s a placeholder names the metric", vs)
		}
		if prev, ok := a.label[f]; ok && prev != m.Name {
			return nil, fmt.Errorf("{{.%s}} matches two labels, %s and %s", f, prev, m.Name)
		}
		for other, l := range a.label {
			if other != f && l == m.Name {
				return nil, fmt.Errorf("the label %s matches both {{.%s}} and {{.%s}}", l, other, f)
			}
		}
		a.label[f] = m.Name
		nm, err := labels.NewMatcher(labels.MatchNotEqual, m.Name, "")
		if err != nil {
			return nil, fmt.Errorf("matcher on %s: %w", m.Name, err)
		}
		vs.LabelMatchers[i] = nm
		kept = append(kept, m.Name)
	}
	if len(kept) != len(a.used) {
		return nil, fmt.Errorf("%s does not match every placeholder the query uses", vs)
	}
	return kept, nil
}

func (a *analysis) call(c *parser.Call) (labelSet, error) {
	if !shareableFuncs[c.Func.Name] {
		return nil, fmt.Errorf("%s() does not keep labels point by point", c.Func.Name)
	}
	var kept labelSet
	vectors := 0
	for _, arg := range c.Args {
		switch arg.Type() {
		case parser.ValueTypeVector, parser.ValueTypeMatrix:
			k, err := a.rewrite(arg)
			if err != nil {
				return nil, err
			}
			kept = k
			vectors++
		default:
			if err := numbersOnly(arg); err != nil {
				return nil, fmt.Errorf("%s(): %w", c.Func.Name, err)
			}
		}
	}
	if vectors != 1 {
		return nil, fmt.Errorf("%s() must take one vector", c.Func.Name)
	}
	if c.Func.Name == "histogram_quantile" && kept.has("le") {
		return nil, errors.New("histogram_quantile() drops le, which a placeholder matches")
	}
	return kept, nil
}

// numbersOnly accepts an argument made of numbers alone.
func numbersOnly(e parser.Expr) error {
	var err error
	parser.Inspect(e, func(n parser.Node, _ []parser.Node) error {
		switch n.(type) {
		case nil, *parser.NumberLiteral, *parser.ParenExpr, *parser.UnaryExpr, *parser.BinaryExpr:
		default:
			err = fmt.Errorf("%s is not a number", e)
		}
		return nil
	})
	return err
}

func (a *analysis) aggregate(ag *parser.AggregateExpr) (labelSet, error) {
	if !shareableAggs[ag.Op] {
		return nil, fmt.Errorf("the aggregation %s cannot be shared", ag.Op)
	}
	if ag.Param != nil {
		if err := numbersOnly(ag.Param); err != nil {
			return nil, fmt.Errorf("%s: %w", ag.Op, err)
		}
	}
	inner, err := a.rewrite(ag.Expr)
	if err != nil {
		return nil, err
	}
	group := a.groupLabels()
	if ag.Without {
		for _, l := range group {
			if slices.Contains(ag.Grouping, l) {
				return nil, fmt.Errorf("%s without(...) drops %s, which a placeholder matches", ag.Op, l)
			}
		}
		return inner, nil
	}
	var kept labelSet
	if ag.Op == parser.TOPK || ag.Op == parser.BOTTOMK {
		kept = inner // they return the series themselves
	}
	for _, l := range group {
		if slices.Contains(ag.Grouping, l) {
			if inner.has(l) && !kept.has(l) {
				kept = append(kept, l)
			}
			continue
		}
		ag.Grouping = append(ag.Grouping, l)
	}
	return kept, nil
}

func (a *analysis) binary(b *parser.BinaryExpr) (labelSet, error) {
	lv := b.LHS.Type() == parser.ValueTypeVector
	rv := b.RHS.Type() == parser.ValueTypeVector
	switch {
	case lv && rv:
	case lv:
		if err := numbersOnly(b.RHS); err != nil {
			return nil, err
		}
		return a.rewrite(b.LHS)
	case rv:
		if err := numbersOnly(b.LHS); err != nil {
			return nil, err
		}
		return a.rewrite(b.RHS)
	default:
		return nil, numbersOnly(b)
	}
	left, err := a.rewrite(b.LHS)
	if err != nil {
		return nil, err
	}
	right, err := a.rewrite(b.RHS)
	if err != nil {
		return nil, err
	}
	if !left.equal(right) {
		return nil, fmt.Errorf("the two sides of %s keep different placeholder labels (%v and %v)", b.Op, left, right)
	}
	vm := b.VectorMatching
	if vm == nil {
		return nil, fmt.Errorf("%s has no vector matching", b.Op)
	}
	if vm.FillValues.LHS != nil || vm.FillValues.RHS != nil {
		return nil, fmt.Errorf("%s fills missing values, which cannot be shared", b.Op)
	}
	group := a.groupLabels()
	kept := slices.Clone(left)
	if vm.On {
		original := slices.Clone(vm.MatchingLabels)
		for _, l := range group {
			if !slices.Contains(vm.MatchingLabels, l) {
				vm.MatchingLabels = append(vm.MatchingLabels, l)
			}
		}
		if vm.Card == parser.CardOneToOne {
			// The answer keeps only the on() labels.
			kept = slices.DeleteFunc(kept, func(l string) bool { return !slices.Contains(original, l) })
		}
	} else {
		ignored := slices.Clone(vm.MatchingLabels)
		vm.MatchingLabels = slices.DeleteFunc(vm.MatchingLabels, func(l string) bool { return slices.Contains(group, l) })
		if vm.Card == parser.CardOneToOne {
			// The answer drops the ignored labels.
			kept = slices.DeleteFunc(kept, func(l string) bool { return slices.Contains(ignored, l) })
		}
	}
	return kept, nil
}

// Key is the line's part of a shared answer: the values its placeholders
// take. It is false when a placeholder is empty (an equality matcher on ""
// matches series without the label, which the shared query leaves out).
func (p *Plan) Key(d speccheck.QueryData) (string, bool) {
	var b strings.Builder
	for _, f := range p.used {
		v := value(d, f)
		if v == "" {
			return "", false
		}
		b.WriteString(v)
		b.WriteByte(0)
	}
	return b.String(), true
}

func value(d speccheck.QueryData, f string) string {
	switch f {
	case "Line":
		return d.Line
	case "Namespace":
		return d.Namespace
	case "Version":
		return d.Version
	}
	return ""
}

// Split divides a shared answer into each line's, by Key. Each line's
// series are what its own query returns: the labels it would not have are
// dropped, and they are sorted by their labels.
func (p *Plan) Split(series []promq.Series) (map[string][]promq.Series, error) {
	out := map[string][]promq.Series{}
	for _, s := range series {
		if s.Metric == nil {
			return nil, errors.New("the answer has no labels to split by")
		}
		var b strings.Builder
		for _, f := range p.used {
			b.WriteString(s.Metric[p.label[f]])
			b.WriteByte(0)
		}
		key := b.String()
		if len(p.strip) > 0 {
			m := make(map[string]string, len(s.Metric))
			for k, v := range s.Metric {
				if !slices.Contains(p.strip, k) {
					m[k] = v
				}
			}
			s = promq.Series{Labels: promq.Labels(m), Metric: m, Points: s.Points}
		}
		out[key] = append(out[key], s)
	}
	for _, ss := range out {
		sort.Slice(ss, func(i, j int) bool { return ss[i].Labels < ss[j].Labels })
	}
	return out, nil
}
