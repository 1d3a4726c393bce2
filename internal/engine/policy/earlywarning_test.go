package policy

import (
	"strings"
	"testing"
	"time"
)

func TestJudgeInputs(t *testing.T) {
	now := time.Date(2026, 11, 2, 3, 10, 0, 0, time.UTC)
	depot := Check{Kind: "drift", Name: "depot-shift", Known: true, Breached: true, Value: 0.41, Series: `{feature="depot"}`}
	weight := Check{Kind: "drift", Name: "weight-shift", Known: true, Value: 0.03}
	hours := Check{Kind: "drift", Name: "hour-shift", Known: true, Breached: true, Value: 0.3}
	down := Check{Kind: "drift", Name: "weight-shift", Err: "connection refused"}
	cases := []struct {
		name            string
		drift           []Check
		delay           time.Duration
		drifted, known  bool
		reason          string
		features        []string
		contains, lacks []string
	}{
		{"moved", []Check{weight, depot, hours}, 2 * time.Hour, true, true, InputsMoved, []string{"depot-shift", "hour-shift"},
			[]string{"the inputs moved (depot-shift, hour-shift)", `drift check depot-shift {feature="depot"} is 0.41`,
				"the predictions since 2026-11-02T01:10:00Z is not known yet (label delay 2h0m0s)", "nothing is started"}, []string{"weight-shift"}},
		{"moved while another is unknown", []Check{down, depot}, 0, true, true, InputsMoved, []string{"depot-shift"},
			[]string{"the inputs moved (depot-shift)"}, []string{"not known yet"}},
		{"steady", []Check{weight}, time.Hour, false, true, InputsSteady, nil, []string{"the inputs are steady: drift check weight-shift is 0.03"}, nil},
		{"unknown", []Check{down}, time.Hour, false, false, DriftUnknown, nil, []string{"cannot be judged", "connection refused"}, nil},
	}
	for _, c := range cases {
		w := JudgeInputs(c.drift, c.delay, now)
		if w.Drifted != c.drifted || w.Known != c.known || w.Reason != c.reason || strings.Join(w.Features, ",") != strings.Join(c.features, ",") {
			t.Errorf("%s: %+v", c.name, w)
		}
		for _, s := range c.contains {
			if !strings.Contains(w.Message, s) {
				t.Errorf("%s: message %q lacks %q", c.name, w.Message, s)
			}
		}
		for _, s := range c.lacks {
			if strings.Contains(w.Message, s) {
				t.Errorf("%s: message %q has %q", c.name, w.Message, s)
			}
		}
	}
}
