// Package backtest replays retraining policies over a model's quality
// history with the controller's own decision rules (internal/policy, the
// trigger judge, the schedule planner): when each policy would have started
// retrains, how long quality stayed below target, how soon a drop was
// acted on, and what that would cost. It also fits how fast a model goes
// stale, to suggest a schedule.
package backtest

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"sort"
	"strconv"
	"strings"
	"time"

	"plumbline.dev/plumbline/internal/engine/promq"
	"plumbline.dev/plumbline/internal/tools/table"
)

// History is a quality series, oldest first.
type History struct {
	Source string
	Points []promq.Point
	// Labelled is the cumulative count of labelled rows at each point (a
	// counter), when the history has it: the fresh data since a retrain is
	// its increase since then.
	Labelled []float64
	// Retrained marks the points where a retrain took effect in reality.
	Retrained []bool
	// LabelledAt is, when the history has it, when each point's labels were
	// in: a point is stamped with the time of the predictions it scores and
	// no trigger sees it before then.
	LabelledAt []time.Time
}

// InputError is a history that cannot be used; it names the file, the line
// and the column.
type InputError struct{ Err error }

func (e *InputError) Error() string { return e.Err.Error() }
func (e *InputError) Unwrap() error { return e.Err }

func inputErr(format string, args ...any) error {
	return &InputError{Err: fmt.Errorf(format, args...)}
}

// parseTime reads RFC 3339 or Unix seconds.
func parseTime(s string) (time.Time, error) {
	s = strings.TrimSpace(s)
	if t, err := time.Parse(time.RFC3339, s); err == nil {
		return t.UTC(), nil
	}
	if f, err := strconv.ParseFloat(s, 64); err == nil && !math.IsNaN(f) && !math.IsInf(f, 0) {
		sec, frac := math.Modf(f)
		return time.Unix(int64(sec), int64(frac*1e9)).UTC(), nil
	}
	return time.Time{}, fmt.Errorf("%q is neither RFC 3339 (2026-11-02T03:00:00Z) nor Unix seconds", s)
}

// LoadCSV reads a history: columns time and value, optionally
// labelled_rows (a cumulative count), retrained (1 where a retrain took
// effect) and labelled_at (when the point's labels were in). Rows must come
// in time order.
func LoadCSV(path string) (*History, error) {
	r, err := table.Open(path, table.CSV)
	if err != nil {
		return nil, inputErr("--history: %w", err)
	}
	defer r.Close()
	at := map[string]int{}
	for i, c := range r.Columns() {
		at[strings.ToLower(c)] = i
	}
	ti, okT := at["time"]
	vi, okV := at["value"]
	if !okT || !okV {
		return nil, inputErr("--history %s: want columns time and value (and optionally labelled_rows, retrained, labelled_at); the columns are %s", path, strings.Join(r.Columns(), ", "))
	}
	li, hasL := at["labelled_rows"]
	ri, hasR := at["retrained"]
	ai, hasA := at["labelled_at"]
	h := &History{Source: path}
	for {
		cells, err := r.Next()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return nil, inputErr("--history: %w", err)
		}
		t, err := parseTime(cells[ti].S)
		if err != nil {
			return nil, inputErr("%s: column time: %v", r.Where(), err)
		}
		if n := len(h.Points); n > 0 && !t.After(h.Points[n-1].T) {
			return nil, inputErr("%s: time %s is not after the row before (%s); sort the history by time", r.Where(), t.Format(time.RFC3339), h.Points[n-1].T.Format(time.RFC3339))
		}
		v, ok := cells[vi].Float()
		if !ok {
			return nil, inputErr("%s: column value: %q is not a number", r.Where(), cells[vi].S)
		}
		h.Points = append(h.Points, promq.Point{T: t, V: v})
		if hasL {
			l, ok := cells[li].Float()
			if !ok {
				return nil, inputErr("%s: column labelled_rows: %q is not a number", r.Where(), cells[li].S)
			}
			h.Labelled = append(h.Labelled, l)
		}
		if hasR {
			s := strings.ToLower(strings.TrimSpace(cells[ri].S))
			h.Retrained = append(h.Retrained, s == "1" || s == "true" || s == "yes")
		}
		if hasA {
			la, err := parseTime(cells[ai].S)
			if err != nil {
				return nil, inputErr("%s: column labelled_at: %v", r.Where(), err)
			}
			if la.Before(t) {
				return nil, inputErr("%s: labelled_at %s is before the point's time %s: a label cannot come in before its prediction", r.Where(), la.Format(time.RFC3339), t.Format(time.RFC3339))
			}
			h.LabelledAt = append(h.LabelledAt, la)
		}
	}
	return h, h.check()
}

// LoadPrometheus reads a history from a range query: the query must come
// back as one series.
func LoadPrometheus(ctx context.Context, q promq.Querier, query string, from, to time.Time, step time.Duration) (*History, error) {
	series, err := q.Range(ctx, query, from, to, step)
	if err != nil {
		return nil, fmt.Errorf("--query: %w", err)
	}
	var kept []promq.Series
	for _, s := range series {
		if len(s.Points) > 0 {
			kept = append(kept, s)
		}
	}
	switch len(kept) {
	case 0:
		return nil, inputErr("--query %s: no data between %s and %s", query, from.Format(time.RFC3339), to.Format(time.RFC3339))
	case 1:
	default:
		var names []string
		for _, s := range kept {
			names = append(names, s.Labels)
		}
		sort.Strings(names)
		return nil, inputErr("--query %s: %d series (%s); aggregate them to one, for example avg(...) or a label matcher", query, len(kept), strings.Join(names, " "))
	}
	h := &History{Source: "prometheus: " + query}
	for _, p := range kept[0].Points {
		if !math.IsNaN(p.V) {
			h.Points = append(h.Points, p)
		}
	}
	return h, h.check()
}

func (h *History) check() error {
	if len(h.Points) < 2 {
		return inputErr("%s: %d points; a history needs at least two", h.Source, len(h.Points))
	}
	return nil
}

// Span is the time the history covers.
func (h *History) Span() time.Duration { return h.Points[len(h.Points)-1].T.Sub(h.Points[0].T) }

// Step is the median time between points.
func (h *History) Step() time.Duration {
	d := make([]time.Duration, 0, len(h.Points)-1)
	for i := 1; i < len(h.Points); i++ {
		d = append(d, h.Points[i].T.Sub(h.Points[i-1].T))
	}
	sort.Slice(d, func(i, j int) bool { return d[i] < d[j] })
	return d[len(d)/2]
}
