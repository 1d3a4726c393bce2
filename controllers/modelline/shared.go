package modelline

import (
	"context"
	"errors"
	"fmt"
	"sync"
	"time"

	promv1 "github.com/prometheus/client_golang/api/prometheus/v1"
	"github.com/prometheus/client_golang/prometheus"
	"sigs.k8s.io/controller-runtime/pkg/log"
	"sigs.k8s.io/controller-runtime/pkg/metrics"

	"plumbline.dev/plumbline/internal/engine/promq"
	"plumbline.dev/plumbline/internal/engine/sharedquery"
	"plumbline.dev/plumbline/internal/engine/speccheck"
	"plumbline.dev/plumbline/internal/engine/trigger"
)

var windowAnswers = prometheus.NewCounterVec(prometheus.CounterOpts{
	Name: "plumbline_window_answers_total",
	Help: "Trigger and guard windows judged, by where their points came from: shared (one query for every line on the same template) or own (the line's own query).",
}, []string{"source"})

func init() { metrics.Registry.MustRegister(windowAnswers) }

// sharedQueries answers the windows of lines whose queries come from one
// template with one range query per window end (see package sharedquery
// for which templates qualify). Windows end on their step's grid, so every
// line judged within one step asks for the same window, and the first to
// ask fetches it for all. Only the newest answer per shared query is kept.
type sharedQueries struct {
	mu sync.Mutex
	// plans are the templates seen, with their plan (nil: asked per line).
	plans   map[string]*sharedquery.Plan
	answers map[answerKey]*answerState
}

// answerState is a shared query's newest answer (maybe still being
// fetched) and its newest complete one.
type answerState struct {
	cur, prev *answer
}

// maxPlans bounds the plans kept; a fleet has a few templates.
const maxPlans = 4096

type answerKey struct {
	query      string
	span, step time.Duration
}

type answer struct {
	end   time.Time
	done  chan struct{}
	parts map[string][]promq.Series
	err   error
}

// plan returns the shared plan of a template, nil when it has none. Plans
// are kept per template text: a fleet has few templates, and a line's own
// literal query (no placeholder) is never kept.
func (s *sharedQueries) plan(ctx context.Context, tmpl string) *sharedquery.Plan {
	if !speccheck.IsTemplate(tmpl) {
		return nil
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	p, ok := s.plans[tmpl]
	if !ok {
		var err error
		p, err = sharedquery.Analyze(tmpl)
		if err != nil {
			// Said once per template: it works, at the cost of a query
			// per line.
			log.FromContext(ctx).Info("query template is asked per line, not shared", "template", tmpl, "why", err.Error())
		}
		if s.plans == nil || len(s.plans) >= maxPlans {
			// Texts edited away leave only here.
			s.plans = map[string]*sharedquery.Plan{}
		}
		s.plans[tmpl] = p
	}
	return p
}

// windowSeries answers a window's range query for one line: from the shared
// answer of its template when it has one, else from its own query. The
// window ends at end (on the step's grid), or one step earlier when a
// shared answer for end is still on its way; it returns the end answered.
func (r *Reconciler) windowSeries(ctx context.Context, tmpl string, d speccheck.QueryData, w trigger.Window, end time.Time) ([]promq.Series, time.Time, error) {
	start, step := end.Add(-w.For), w.Step()
	if !r.PerLineQueries {
		if p := r.shared.plan(ctx, tmpl); p != nil {
			if key, ok := p.Key(d); ok {
				parts, answered, err := r.shared.fetch(ctx, r.Prometheus, p, w.For, step, end)
				if err == nil {
					windowAnswers.WithLabelValues("shared").Inc()
					return parts[key], answered, nil
				}
				if !isQueryError(err) {
					return nil, end, err
				}
				// The shared query failed on its own terms (one line's
				// series may break a vector match for all): each line
				// asks its own, which fails only where it would.
			}
		}
	}
	query, err := speccheck.RenderQuery(tmpl, d)
	if err != nil {
		return nil, end, err
	}
	windowAnswers.WithLabelValues("own").Inc()
	series, err := r.Prometheus.Range(ctx, query, start, end, step)
	return series, end, err
}

// fetch returns the shared answer for a window ending at end, and the end
// it answers for, asking Prometheus once however many lines want it. While
// the answer for a new end is being fetched (seconds, for ten thousand
// lines' series), lines that want it are answered from the previous end,
// one step older, rather than holding every worker until it comes: the
// fetch would otherwise stall the whole queue once a step.
func (s *sharedQueries) fetch(ctx context.Context, q promq.Querier, p *sharedquery.Plan, span, step time.Duration, end time.Time) (map[string][]promq.Series, time.Time, error) {
	key := answerKey{query: p.Query, span: span, step: step}
	s.mu.Lock()
	st := s.answers[key]
	if st == nil {
		st = &answerState{}
		if s.answers == nil {
			s.answers = map[answerKey]*answerState{}
		}
		s.answers[key] = st
	}
	a := st.cur
	if a != nil && a.end.Equal(end) {
		select {
		case <-a.done:
		default:
			if prev := st.prev; prev != nil && prev.end.Equal(end.Add(-step)) {
				s.mu.Unlock()
				return prev.parts, prev.end, nil
			}
		}
		s.mu.Unlock()
		select {
		case <-a.done:
			return a.parts, a.end, a.err
		case <-ctx.Done():
			return nil, end, fmt.Errorf("waiting for a shared query: %w", ctx.Err())
		}
	}
	fresh := &answer{end: end, done: make(chan struct{})}
	if a == nil || a.end.Before(end) {
		// Only the newest is kept, and the last complete one; a late
		// line's older window is fetched for it alone.
		st.cur = fresh
	}
	s.mu.Unlock()
	series, err := q.Range(ctx, p.Query, end.Add(-span), end, step)
	if err == nil {
		fresh.parts, err = p.Split(series)
	}
	fresh.err = err
	s.mu.Lock()
	if st.cur == fresh {
		if err != nil {
			st.cur = nil // the next line asks again
		} else {
			st.prev = fresh
		}
	}
	s.mu.Unlock()
	close(fresh.done)
	return fresh.parts, end, err
}

// isQueryError tells a query Prometheus refused or could not run (which a
// line's own query might not hit) from a server that could not be reached
// or timed out (which a line's own query would too, and ten thousand of
// them would make worse): only the first goes per line.
func isQueryError(err error) bool {
	var pe *promv1.Error
	if errors.As(err, &pe) {
		return pe.Type == promv1.ErrExec || pe.Type == promv1.ErrBadData
	}
	return false
}
