// Package promq asks a Prometheus server the questions plumbline's triggers,
// checks and guards ask: a range query over a window, or an instant query.
// It returns plain series of points and counts every query in a metric.
//
// The Querier interface is the seam for fleets: a decorator can answer many
// lines that share a query shape with one grouped query, without the callers
// changing.
package promq

import (
	"context"
	"errors"
	"fmt"
	"math"
	"net/http"
	"sort"
	"strings"
	"time"

	"github.com/prometheus/client_golang/api"
	promv1 "github.com/prometheus/client_golang/api/prometheus/v1"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/common/model"
	"sigs.k8s.io/controller-runtime/pkg/metrics"
)

// Point is one sample.
type Point struct {
	T time.Time
	V float64
}

// Series is one labelled series of points, oldest first.
type Series struct {
	// Labels renders the series' labels, for example
	// {depot="harbour",window="24h"}; "{}" for a series without labels.
	Labels string
	// Metric holds the same labels as a map (without the metric name); nil
	// when the answer did not come from a server.
	Metric map[string]string
	Points []Point
}

// Querier answers PromQL queries.
type Querier interface {
	// Range evaluates query at every step from start to end.
	Range(ctx context.Context, query string, start, end time.Time, step time.Duration) ([]Series, error)
	// Instant evaluates query at one time; each series has one point.
	Instant(ctx context.Context, query string, at time.Time) ([]Series, error)
}

// ErrNotConfigured is the error of a Querier with no server.
var ErrNotConfigured = errors.New("no Prometheus server is configured (the manager's --prometheus-url)")

// None is the Querier of a manager started without a Prometheus URL: every
// question is unanswerable.
type None struct{}

func (None) Range(context.Context, string, time.Time, time.Time, time.Duration) ([]Series, error) {
	return nil, ErrNotConfigured
}

func (None) Instant(context.Context, string, time.Time) ([]Series, error) {
	return nil, ErrNotConfigured
}

var queries = prometheus.NewCounterVec(prometheus.CounterOpts{
	Name: "plumbline_prometheus_queries_total",
	Help: "Queries plumbline sent to Prometheus, by kind (range, instant) and result (ok, error).",
}, []string{"kind", "result"})

func init() { metrics.Registry.MustRegister(queries) }

// Client queries one Prometheus server over its HTTP API.
type Client struct {
	api     promv1.API
	timeout time.Duration
}

// New returns a Client for the server at url. Each query gives up after
// timeout.
func New(url string, timeout time.Duration) (*Client, error) {
	c, err := api.NewClient(api.Config{Address: url, Client: &http.Client{Timeout: timeout}})
	if err != nil {
		return nil, fmt.Errorf("prometheus client for %s: %w", url, err)
	}
	return &Client{api: promv1.NewAPI(c), timeout: timeout}, nil
}

// Range runs a range query.
func (c *Client) Range(ctx context.Context, query string, start, end time.Time, step time.Duration) ([]Series, error) {
	ctx, cancel := context.WithTimeout(ctx, c.timeout)
	defer cancel()
	v, _, _, err := c.api.QueryRange(ctx, query, promv1.Range{Start: start, End: end, Step: step})
	if err != nil {
		queries.WithLabelValues("range", "error").Inc()
		return nil, fmt.Errorf("range query %q: %w", query, err)
	}
	queries.WithLabelValues("range", "ok").Inc()
	return convert(v)
}

// Instant runs an instant query.
func (c *Client) Instant(ctx context.Context, query string, at time.Time) ([]Series, error) {
	ctx, cancel := context.WithTimeout(ctx, c.timeout)
	defer cancel()
	v, _, _, err := c.api.Query(ctx, query, at)
	if err != nil {
		queries.WithLabelValues("instant", "error").Inc()
		return nil, fmt.Errorf("query %q: %w", query, err)
	}
	queries.WithLabelValues("instant", "ok").Inc()
	return convert(v)
}

// convert turns a query result into series, sorted by labels.
func convert(v model.Value) ([]Series, error) {
	var out []Series
	switch r := v.(type) {
	case model.Matrix:
		for _, s := range r {
			ser := Series{Labels: labels(s.Metric), Metric: labelMap(s.Metric)}
			for _, p := range s.Values {
				ser.Points = append(ser.Points, Point{T: p.Timestamp.Time().UTC(), V: float64(p.Value)})
			}
			out = append(out, ser)
		}
	case model.Vector:
		for _, s := range r {
			out = append(out, Series{Labels: labels(s.Metric), Metric: labelMap(s.Metric), Points: []Point{{T: s.Timestamp.Time().UTC(), V: float64(s.Value)}}})
		}
	case *model.Scalar:
		out = append(out, Series{Labels: "{}", Metric: map[string]string{}, Points: []Point{{T: r.Timestamp.Time().UTC(), V: float64(r.Value)}}})
	default:
		return nil, fmt.Errorf("unexpected result type %s", v.Type())
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Labels < out[j].Labels })
	return out, nil
}

// labels renders a metric's labels without its name, sorted.
func labels(m model.Metric) string { return Labels(labelMap(m)) }

func labelMap(m model.Metric) map[string]string {
	out := make(map[string]string, len(m))
	for k, v := range m {
		if k != model.MetricNameLabel {
			out[string(k)] = string(v)
		}
	}
	return out
}

// Labels renders labels as Series.Labels does: sorted, the values quoted.
func Labels(m map[string]string) string {
	parts := make([]string, 0, len(m))
	for k, v := range m {
		parts = append(parts, fmt.Sprintf("%s=%q", k, v))
	}
	sort.Strings(parts)
	return "{" + strings.Join(parts, ",") + "}"
}

// Format renders a sample value for status: PromQL values can be NaN or
// infinite, which JSON numbers cannot hold.
func Format(v float64) string {
	switch {
	case math.IsNaN(v):
		return "NaN"
	case math.IsInf(v, 1):
		return "+Inf"
	case math.IsInf(v, -1):
		return "-Inf"
	}
	return fmt.Sprintf("%.6g", v)
}
