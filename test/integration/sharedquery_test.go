package integration

import (
	"context"
	"fmt"
	"math"
	"slices"
	"testing"
	"time"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/promq"
	"plumbline.dev/plumbline/internal/engine/sharedquery"
	"plumbline.dev/plumbline/internal/engine/speccheck"
	"plumbline.dev/plumbline/internal/engine/trigger"
	"plumbline.dev/plumbline/internal/testenv/promserver"
)

// proofLine is one line of the shared-query proof's synthetic fleet.
type proofLine struct{ ns, line, live string }

// proofFleet is 24 lines in three namespaces, with three versions and two
// depots each. Their quality drops, recovers, has holes and differs by
// depot at different times, so that every trigger state occurs.
var proofFleet = func() []proofLine {
	var out []proofLine
	for i := range 24 {
		out = append(out, proofLine{ns: fmt.Sprintf("proof-%d", i%3), line: fmt.Sprintf("line-%02d", i), live: fmt.Sprintf("v%d", i%3)})
	}
	return out
}()

func init() {
	versions := []string{"v0", "v1", "v2"}
	depots := []string{"north", "fenwick"}
	for i, l := range proofFleet {
		drop := day0.Add(time.Duration(60+17*i) * time.Minute)
		recover := drop.Add(time.Duration(20+9*(i%5)) * time.Minute)
		holeFrom := day0.Add(time.Duration(90+23*i) * time.Minute)
		for vi, ver := range versions {
			for di, d := range depots {
				auc := promserver.Series{Name: "fleetproof_auc", Labels: map[string]string{"namespace": l.ns, "line": l.line, "version": ver, "depot": d}}
				late := promserver.Series{Name: "fleetproof_late_total", Labels: map[string]string{"namespace": l.ns, "line": l.line, "version": ver, "depot": d}}
				parcels := promserver.Series{Name: "fleetproof_parcels_total", Labels: map[string]string{"namespace": l.ns, "line": l.line, "version": ver, "depot": d}}
				var lateN, parcelN float64
				for t := day0; t.Before(day0.Add(8 * time.Hour)); t = t.Add(time.Minute) {
					k := float64(t.Sub(day0) / time.Minute)
					v := 0.84 + 0.02*math.Sin(k/7+float64(i+vi+di))
					// The live version drops (in fenwick only, for odd lines),
					// and recovers unless the line is a multiple of four.
					if vi == i%3 && !t.Before(drop) && (t.Before(recover) || i%4 == 0) && (di == 1 || i%2 == 0) {
						v = 0.70 + 0.03*math.Sin(k/5)
					}
					if i%3 == 1 && !t.Before(holeFrom) && t.Before(holeFrom.Add(25*time.Minute)) {
						continue // the exporter was down
					}
					auc.Samples = append(auc.Samples, promserver.Sample{T: t, V: v})
					parcelN += 100
					lateN += 8 + 10*(0.84-v)*100/14
					parcels.Samples = append(parcels.Samples, promserver.Sample{T: t, V: parcelN})
					late.Samples = append(late.Samples, promserver.Sample{T: t, V: lateN})
				}
				extraHistory = append(extraHistory, auc, late, parcels)
			}
		}
	}
}

// The shared path gives every line exactly the answer its own query gives:
// for the same backfilled history on the real Prometheus, the same series
// with the same points, and so the same trigger states, values and
// messages. Each template is one the sharing rules accept; the windows'
// ends are taken both on and off their step's grid.
func TestSharedQueriesMatchPerLine(t *testing.T) {
	if prometheusURL == "" {
		t.Skip("no Prometheus")
	}
	prom, err := promq.New(prometheusURL, 30*time.Second)
	if err != nil {
		t.Fatal(err)
	}
	below, above, share := 0.78, 0.2, 0.9
	templates := []struct {
		query string
		th    trigger.Threshold
	}{
		{`min(fleetproof_auc{namespace="{{.Namespace}}", line="{{.Line}}", version="{{.Version}}"})`, trigger.Threshold{Below: &below}},
		{`avg by (depot) (fleetproof_auc{line="{{.Line}}", namespace="{{.Namespace}}"})`, trigger.Threshold{Below: &below}},
		{`fleetproof_auc{line="{{.Line}}", namespace="{{.Namespace}}", version="{{.Version}}"}`, trigger.Threshold{Below: &below}},
		{`sum(rate(fleetproof_late_total{line="{{.Line}}", namespace="{{.Namespace}}"}[10m])) / sum(rate(fleetproof_parcels_total{line="{{.Line}}", namespace="{{.Namespace}}"}[10m]))`, trigger.Threshold{Above: &above}},
		{`max_over_time(avg(fleetproof_auc{line="{{.Line}}", namespace="{{.Namespace}}", version="{{.Version}}"})[15m:1m])`, trigger.Threshold{Below: &below}},
		{`fleetproof_auc{line="{{.Line}}", namespace="{{.Namespace}}", version="{{.Version}}"} / ignoring (depot) group_left max without (depot) (fleetproof_auc{line="{{.Line}}", namespace="{{.Namespace}}", version="{{.Version}}"})`, trigger.Threshold{Below: &share}},
		{`topk(1, fleetproof_auc{line="{{.Line}}", namespace="{{.Namespace}}", version="{{.Version}}"})`, trigger.Threshold{Below: &below}},
	}
	windows := []trigger.Window{
		{For: 30 * time.Minute, Every: time.Minute},
		{For: 5 * time.Minute, Every: time.Minute}, // a step of 30 s
	}
	ctx := context.Background()
	seen := map[v1alpha1.TriggerState]int{}
	compared := 0
	for _, tc := range templates {
		plan, err := sharedquery.Analyze(tc.query)
		if err != nil {
			t.Fatalf("%s cannot be shared: %v", tc.query, err)
		}
		for _, w := range windows {
			for now := day0.Add(40 * time.Minute); now.Before(day0.Add(7 * time.Hour)); now = now.Add(13*time.Minute + 7*time.Second) {
				end := w.End(now)
				shared, err := prom.Range(ctx, plan.Query, end.Add(-w.For), end, w.Step())
				if err != nil {
					t.Fatalf("shared %s: %v", plan.Query, err)
				}
				parts, err := plan.Split(shared)
				if err != nil {
					t.Fatal(err)
				}
				for _, l := range proofFleet {
					d := speccheck.QueryData{Line: l.line, Namespace: l.ns, Version: l.live}
					query, err := speccheck.RenderQuery(tc.query, d)
					if err != nil {
						t.Fatal(err)
					}
					own, err := prom.Range(ctx, query, end.Add(-w.For), end, w.Step())
					if err != nil {
						t.Fatalf("%s: %v", query, err)
					}
					key, ok := plan.Key(d)
					if !ok {
						t.Fatalf("%+v has no key", d)
					}
					mine := parts[key]
					if msg := sameSeries(own, mine); msg != "" {
						t.Fatalf("%s at %s, window %s:\n%s\nshared query: %s", query, end.Format(time.TimeOnly), w.For, msg, plan.Query)
					}
					a, b := trigger.Judge(own, tc.th, w, end), trigger.Judge(mine, tc.th, w, end)
					if a.State != b.State || a.Message != b.Message || a.Series != b.Series || !a.Since.Equal(b.Since) || promq.Format(a.Value) != promq.Format(b.Value) {
						t.Fatalf("%s at %s: own %+v, shared %+v", query, end, a, b)
					}
					seen[a.State]++
					compared++
				}
			}
		}
	}
	t.Logf("%d judgements identical; states: %v", compared, seen)
	for _, s := range []v1alpha1.TriggerState{v1alpha1.TriggerFiring, v1alpha1.TriggerPending, v1alpha1.TriggerInactive, v1alpha1.TriggerUnknown} {
		if seen[s] == 0 {
			t.Errorf("no judgement was %s: the history does not exercise every state", s)
		}
	}
}

// sameSeries says how two answers differ, "" when they do not.
func sameSeries(own, shared []promq.Series) string {
	if len(own) != len(shared) {
		return fmt.Sprintf("own %d series %v, shared %d %v", len(own), labelsOf(own), len(shared), labelsOf(shared))
	}
	for i := range own {
		if own[i].Labels != shared[i].Labels {
			return fmt.Sprintf("series %d: own %s, shared %s", i, own[i].Labels, shared[i].Labels)
		}
		if !slices.EqualFunc(own[i].Points, shared[i].Points, func(a, b promq.Point) bool {
			return a.T.Equal(b.T) && (a.V == b.V || math.IsNaN(a.V) && math.IsNaN(b.V))
		}) {
			return fmt.Sprintf("series %s: own points %v, shared %v", own[i].Labels, own[i].Points, shared[i].Points)
		}
	}
	return ""
}

func labelsOf(ss []promq.Series) []string {
	var out []string
	for _, s := range ss {
		out = append(out, s.Labels)
	}
	return out
}
