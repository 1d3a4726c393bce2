package modelline

import (
	"context"
	"sync/atomic"
	"testing"
	"time"

	"plumbline.dev/plumbline/internal/engine/promq"
	"plumbline.dev/plumbline/internal/engine/sharedquery"
)

// gatedProm answers range queries with one series per line; each answer
// waits until release is closed, and the queries are counted.
type gatedProm struct {
	release chan struct{}
	queries atomic.Int32
}

func (g *gatedProm) Range(_ context.Context, _ string, _, end time.Time, _ time.Duration) ([]promq.Series, error) {
	g.queries.Add(1)
	<-g.release
	return []promq.Series{{Labels: `{line="a"}`, Metric: map[string]string{"line": "a"}, Points: []promq.Point{{T: end, V: 1}}}}, nil
}

func (g *gatedProm) Instant(context.Context, string, time.Time) ([]promq.Series, error) {
	return nil, nil
}

// One query answers every line for a window end; while the next end's
// answer is on its way, lines are answered from the previous end instead
// of waiting (a worker blocked per line would stall the queue); with no
// previous end they wait for it.
func TestSharedFetch(t *testing.T) {
	p, err := sharedquery.Analyze(`min(auc{line="{{.Line}}"})`)
	if err != nil {
		t.Fatal(err)
	}
	var s sharedQueries
	g := &gatedProm{release: make(chan struct{})}
	ctx := context.Background()
	step, span := time.Minute, 30*time.Minute
	t0 := time.Date(2026, 11, 2, 4, 0, 0, 0, time.UTC)

	// The first end: nothing older, so a second asker waits for the first.
	got := make(chan time.Time, 2)
	for range 2 {
		go func() {
			_, at, err := s.fetch(ctx, g, p, span, step, t0)
			if err != nil {
				t.Error(err)
			}
			got <- at
		}()
	}
	time.Sleep(50 * time.Millisecond)
	if n := len(got); n != 0 {
		t.Fatalf("%d answers before Prometheus answered, with no older one to give", n)
	}
	close(g.release)
	for range 2 {
		if at := <-got; !at.Equal(t0) {
			t.Fatalf("answered for %s, want %s", at, t0)
		}
	}
	if n := g.queries.Load(); n != 1 {
		t.Fatalf("%d queries for one end, want 1", n)
	}

	// The next end: its fetch is slow; others get the previous end's.
	g.release = make(chan struct{})
	t1 := t0.Add(step)
	first := make(chan time.Time, 1)
	go func() {
		_, at, _ := s.fetch(ctx, g, p, span, step, t1)
		first <- at
	}()
	for g.queries.Load() != 2 {
		time.Sleep(time.Millisecond)
	}
	parts, at, err := s.fetch(ctx, g, p, span, step, t1)
	if err != nil || !at.Equal(t0) || len(parts["a\x00"]) != 1 {
		t.Fatalf("while t1 is fetched: answered for %s (%v, %d series), want t0's answer at once", at, err, len(parts["a\x00"]))
	}
	close(g.release)
	if at := <-first; !at.Equal(t1) {
		t.Fatalf("the fetcher got %s, want %s", at, t1)
	}
	if _, at, _ := s.fetch(ctx, g, p, span, step, t1); !at.Equal(t1) {
		t.Fatalf("after the fetch: %s, want %s", at, t1)
	}
	if n := g.queries.Load(); n != 2 {
		t.Fatalf("%d queries for two ends, want 2", n)
	}
}
