package policy

import (
	"strings"
	"testing"
	"time"
)

func ok(kind, name string, v float64) Check {
	return Check{Kind: kind, Name: name, Known: true, Value: v}
}

func breach(kind, name string, v float64) Check {
	return Check{Kind: kind, Name: name, Known: true, Breached: true, Value: v}
}

func unknown(kind, name string) Check {
	return Check{Kind: kind, Name: name, Err: "dial tcp: connection refused"}
}

func TestDecideStart(t *testing.T) {
	fresh := func(c Check) *Check { return &c }
	cases := []struct {
		name    string
		path    string
		cr      Checks
		outcome string
		text    string
	}{
		{"no checks", PathTrigger, Checks{}, Started, "checks passed"},
		{"all pass", PathTrigger, Checks{
			DataQuality: []Check{ok("data-quality", "address-missing", 0.01)},
			Drift:       []Check{breach("drift", "depot-shift", 0.4)},
			FreshData:   fresh(ok("fresh-data", "freshData", 50000)), AtLeast: 20000}, Started, ""},
		{"broken data", PathTrigger, Checks{
			DataQuality: []Check{ok("data-quality", "scan-feed", 10), breach("data-quality", "address-missing", 0.18)},
			Drift:       []Check{breach("drift", "depot-shift", 0.4)}}, DataQualityIssue, "data-quality check address-missing is 0.18"},
		{"a breach beats an unknown", PathTrigger, Checks{
			DataQuality: []Check{unknown("data-quality", "scan-feed"), breach("data-quality", "address-missing", 0.18)}}, DataQualityIssue, "address-missing"},
		{"data quality unknown", PathManual, Checks{
			DataQuality: []Check{unknown("data-quality", "scan-feed")}}, ChecksUnknown, "could not be judged: dial tcp"},
		{"no drift", PathTrigger, Checks{
			Drift: []Check{ok("drift", "depot-shift", 0.05), ok("drift", "distance-shift", 0.02)}}, DegradedWithoutDrift, "drift check depot-shift is 0.05; drift check distance-shift is 0.02"},
		{"one drift is enough", PathTrigger, Checks{
			Drift: []Check{ok("drift", "depot-shift", 0.05), breach("drift", "distance-shift", 0.3)}}, Started, ""},
		{"drift found despite an unknown", PathTrigger, Checks{
			Drift: []Check{unknown("drift", "depot-shift"), breach("drift", "distance-shift", 0.3)}}, Started, ""},
		{"no drift found, one unknown", PathTrigger, Checks{
			Drift: []Check{unknown("drift", "depot-shift"), ok("drift", "distance-shift", 0.1)}}, ChecksUnknown, "depot-shift"},
		{"schedule skips drift", PathSchedule, Checks{
			Drift: []Check{ok("drift", "depot-shift", 0.05)}}, Started, ""},
		{"too few labels", PathTrigger, Checks{
			FreshData: fresh(breach("fresh-data", "freshData", 3000)), AtLeast: 20000}, InsufficientData, "fresh-data check freshData is 3000, below the 20000"},
		{"fresh data unknown", PathSchedule, Checks{
			FreshData: fresh(unknown("fresh-data", "freshData")), AtLeast: 20000}, ChecksUnknown, "freshData could not be judged"},
		{"data quality before fresh data", PathSchedule, Checks{
			DataQuality: []Check{breach("data-quality", "address-missing", 0.2)},
			FreshData:   fresh(breach("fresh-data", "freshData", 3000)), AtLeast: 20000}, DataQualityIssue, ""},
	}
	for _, c := range cases {
		v := DecideStart(c.path, c.cr)
		if v.Outcome != c.outcome || !strings.Contains(v.Message, c.text) {
			t.Errorf("%s: %s %q, want %s containing %q", c.name, v.Outcome, v.Message, c.outcome, c.text)
		}
	}
}

func TestTriggerMayStart(t *testing.T) {
	now := time.Date(2026, 11, 2, 4, 0, 0, 0, time.UTC)
	last := now.Add(-30 * time.Minute)
	live := now.Add(-10 * time.Minute)
	cases := []struct {
		inFlight bool
		last     *time.Time
		cooldown time.Duration
		live     *time.Time
		window   time.Duration
		outcome  string
		ok       bool
	}{
		{false, nil, time.Hour, nil, time.Hour, "", true},
		{true, nil, time.Hour, nil, time.Hour, InFlight, false},
		{false, &last, time.Hour, nil, time.Hour, Cooldown, false},
		{false, &last, 30 * time.Minute, nil, time.Hour, "", true}, // the cooldown ends at 04:00 exactly
		{true, &last, time.Hour, nil, time.Hour, InFlight, false},
		// Live for 10 minutes: a 30-minute window still holds the replaced
		// version's data; a 10-minute one is all the live version's.
		{false, &last, 30 * time.Minute, &live, 30 * time.Minute, LiveTooRecent, false},
		{false, &last, 30 * time.Minute, &live, 10 * time.Minute, "", true},
	}
	for i, c := range cases {
		outcome, ok := TriggerMayStart(c.inFlight, c.last, c.cooldown, c.live, c.window, now)
		if outcome != c.outcome || ok != c.ok {
			t.Errorf("case %d: %q %v, want %q %v", i, outcome, ok, c.outcome, c.ok)
		}
	}
	if CooldownOf(nil) != time.Hour {
		t.Error("default cooldown")
	}
	s := int32(90)
	if CooldownOf(&s) != 90*time.Second {
		t.Error("cooldown of 90 s")
	}
}
