package trigger

import (
	"math"
	"strings"
	"testing"
	"time"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/promq"
)

var now = time.Date(2026, 11, 2, 9, 30, 0, 0, time.UTC)

func b(v float64) *float64 { return &v }

// series builds one point a minute ending at now from values, oldest first.
func series(labels string, values ...float64) promq.Series {
	s := promq.Series{Labels: labels}
	for i, v := range values {
		s.Points = append(s.Points, promq.Point{T: now.Add(-time.Duration(len(values)-1-i) * time.Minute), V: v})
	}
	return s
}

// A 10-minute window judged every minute: eleven points, nine needed.
var tenMinutes = Window{For: 10 * time.Minute, Every: time.Minute}

func TestWindowSampling(t *testing.T) {
	cases := []struct {
		w        Window
		step     time.Duration
		expected int
		min      int
	}{
		{tenMinutes, time.Minute, 11, 9},
		{Window{For: 6 * time.Hour, Every: 5 * time.Minute}, 5 * time.Minute, 73, 59},
		{Window{For: 10 * time.Minute, Every: 10 * time.Minute}, time.Minute, 11, 9}, // at least ten points a window
		{Window{For: 5 * time.Second, Every: 5 * time.Second}, time.Second, 6, 5},    // never below a second
		{Window{For: 10 * time.Minute, Every: time.Minute, Coverage: 0.5}, time.Minute, 11, 6},
		{Window{For: 10 * time.Minute, Every: time.Minute, Coverage: 0.01}, time.Minute, 11, 2}, // never fewer than two
	}
	for _, c := range cases {
		if c.w.Step() != c.step || c.w.Expected() != c.expected || c.w.MinPoints() != c.min {
			t.Errorf("%+v: step %s expected %d min %d; want %s %d %d", c.w, c.w.Step(), c.w.Expected(), c.w.MinPoints(), c.step, c.expected, c.min)
		}
	}
}

func TestJudge(t *testing.T) {
	below := Threshold{Below: b(0.78)}
	above := Threshold{Above: b(0.12)}
	nan := math.NaN()
	cases := []struct {
		name   string
		th     Threshold
		series []promq.Series
		state  v1alpha1.TriggerState
		value  float64
		since  time.Duration // before now, for Pending and Firing
		text   string
	}{
		{"healthy", below, []promq.Series{series("", 0.81, 0.8, 0.82, 0.81, 0.8, 0.79, 0.8, 0.81, 0.82, 0.8, 0.81)},
			v1alpha1.TriggerInactive, 0.81, 0, "latest value 0.81 is not below 0.78"},
		{"sustained drop", below, []promq.Series{series("", 0.74, 0.75, 0.73, 0.74, 0.72, 0.74, 0.75, 0.73, 0.74, 0.74, 0.73)},
			v1alpha1.TriggerFiring, 0.73, 10 * time.Minute, "below 0.78 at all 11 points over 10m0s"},
		{"brief dip (one bad scrape)", below, []promq.Series{series("", 0.81, 0.8, 0.82, 0.81, 0.8, 0.31, 0.8, 0.81, 0.82, 0.8, 0.81)},
			v1alpha1.TriggerInactive, 0.81, 0, "not below"},
		{"dip ongoing", below, []promq.Series{series("", 0.81, 0.8, 0.82, 0.81, 0.8, 0.81, 0.8, 0.81, 0.7, 0.71, 0.7)},
			v1alpha1.TriggerPending, 0.7, 2 * time.Minute, "(3 of 11 points), not yet for 10m0s"},
		{"one good point breaks the run", below, []promq.Series{series("", 0.7, 0.7, 0.7, 0.7, 0.7, 0.79, 0.7, 0.7, 0.7, 0.7, 0.7)},
			v1alpha1.TriggerPending, 0.7, 4 * time.Minute, "5 of 11 points"},
		{"above", above, []promq.Series{series("", 0.2, 0.2, 0.2, 0.2, 0.2, 0.2, 0.2, 0.2, 0.2, 0.2, 0.2)},
			v1alpha1.TriggerFiring, 0.2, 10 * time.Minute, "above 0.12"},
		{"equal is not a breach", above, []promq.Series{series("", 0.12, 0.12, 0.12, 0.12, 0.12, 0.12, 0.12, 0.12, 0.12, 0.12, 0.12)},
			v1alpha1.TriggerInactive, 0.12, 0, "not above"},
		{"too few points", below, []promq.Series{series("", 0.7, 0.7, 0.7, 0.7, 0.7, 0.7, 0.7, 0.7)},
			v1alpha1.TriggerUnknown, 0.7, 0, "only 8 of the window's 11 points are there (9 needed)"},
		{"NaN points are missing points", below, []promq.Series{series("", 0.7, nan, 0.7, nan, 0.7, nan, 0.7, 0.7, 0.7, 0.7, 0.7)},
			v1alpha1.TriggerUnknown, 0.7, 0, "only 8"},
		{"enough despite gaps", below, []promq.Series{series("", 0.7, nan, 0.7, 0.7, 0.7, 0.7, 0.7, nan, 0.7, 0.7, 0.7)},
			v1alpha1.TriggerFiring, 0.7, 10 * time.Minute, "at all 9 points"},
		{"points outside the window are ignored", below, []promq.Series{series("", 0.9, 0.9, 0.7, 0.7, 0.7, 0.7, 0.7, 0.7, 0.7, 0.7, 0.7, 0.7, 0.7)},
			v1alpha1.TriggerFiring, 0.7, 10 * time.Minute, "at all 11 points"},
		{"no series", below, nil, v1alpha1.TriggerUnknown, nan, 0, "no series"},
		{"one depot fires", below, []promq.Series{
			series(`{depot="harbour"}`, 0.7, 0.7, 0.7, 0.7, 0.7, 0.7, 0.7, 0.7, 0.7, 0.7, 0.7),
			series(`{depot="north"}`, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8),
			series(`{depot="fenwick"}`, 0.7, 0.7, 0.7),
		}, v1alpha1.TriggerFiring, 0.7, 10 * time.Minute, `{depot="harbour"}: below 0.78 at all 11 points over 10m0s (latest 0.7) (1 of 3 series Firing)`},
		{"pending beats inactive", below, []promq.Series{
			series(`{depot="a"}`, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8),
			series(`{depot="b"}`, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.7, 0.7),
		}, v1alpha1.TriggerPending, 0.7, time.Minute, `{depot="b"}`},
		{"inactive beats unknown", below, []promq.Series{
			series(`{depot="a"}`, 0.7),
			series(`{depot="b"}`, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8),
		}, v1alpha1.TriggerInactive, 0.8, 0, "1 of 2 series Inactive"},
		{"all unknown", below, []promq.Series{series(`{depot="a"}`, 0.7), series(`{depot="b"}`, 0.7)},
			v1alpha1.TriggerUnknown, 0.7, 0, "2 of 2 series Unknown"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			r := Judge(c.series, c.th, tenMinutes, now)
			if r.State != c.state {
				t.Fatalf("state %s (%s), want %s", r.State, r.Message, c.state)
			}
			if !(r.Value == c.value || math.IsNaN(r.Value) && math.IsNaN(c.value)) {
				t.Errorf("value %v, want %v", r.Value, c.value)
			}
			if (c.state == v1alpha1.TriggerPending || c.state == v1alpha1.TriggerFiring) && !r.Since.Equal(now.Add(-c.since)) {
				t.Errorf("since %s, want %s", r.Since, now.Add(-c.since))
			}
			if !strings.Contains(r.Message, c.text) {
				t.Errorf("message %q lacks %q", r.Message, c.text)
			}
		})
	}
}

func TestThreshold(t *testing.T) {
	if (Threshold{Below: b(1)}).Breached(math.NaN()) || (Threshold{}).Breached(-1e9) {
		t.Error("NaN or no threshold breached")
	}
	if !(Threshold{Above: b(1)}).Breached(math.Inf(1)) || !(Threshold{Below: b(1)}).Breached(math.Inf(-1)) {
		t.Error("infinities must breach")
	}
}

// A label delay moves the window of points stamped at prediction time back
// by the delay (as PromQL offset would); points stamped when scored keep
// their window and only the predictions it judges move. Either way the
// window after a promotion is judged once the promoted version's last
// predictions in it have their labels.
func TestWindowLabelDelay(t *testing.T) {
	at := time.Date(2026, 11, 2, 9, 30, 40, 0, time.UTC)
	promoted := time.Date(2026, 11, 2, 6, 0, 0, 0, time.UTC)
	hour := time.Hour
	cases := []struct {
		name          string
		w             Window
		end, from, to string
		matured, text string
	}{
		{"no delay", Window{For: hour, Every: time.Minute}, "09:30", "08:30", "09:30", "07:00", ""},
		{"stamped at prediction", Window{For: hour, Every: time.Minute, Delay: 2 * hour}, "07:30", "06:30", "07:30", "09:00",
			"predictions of 2026-11-02 06:30 to 07:30 UTC"},
		{"stamped when scored", Window{For: hour, Every: time.Minute, Delay: 2 * hour, Scored: true}, "09:30", "06:30", "07:30", "09:00",
			"predictions of 2026-11-02 06:30 to 07:30 UTC"},
		{"across midnight", Window{For: 6 * hour, Every: 5 * time.Minute, Delay: 8 * hour}, "01:30", "19:30", "01:30", "20:00",
			"predictions of 2026-11-01 19:30 to 2026-11-02 01:30 UTC"},
		{"seconds", Window{For: 50 * time.Second, Every: 10 * time.Second, Delay: 30 * time.Second}, "09:30:10", "09:29:20", "09:30:10", "06:01:20",
			"predictions of 2026-11-02 09:29:20 to 09:30:10 UTC"},
	}
	clock := func(t time.Time) string {
		if t.Second() != 0 {
			return t.Format("15:04:05")
		}
		return t.Format("15:04")
	}
	for _, c := range cases {
		end := c.w.End(at)
		from, to := c.w.Period(end)
		if clock(end) != c.end || clock(from) != c.from || clock(to) != c.to || clock(c.w.Matured(promoted)) != c.matured {
			t.Errorf("%s: end %s, predictions %s to %s, matured %s; want %s, %s to %s, %s", c.name,
				clock(end), clock(from), clock(to), clock(c.w.Matured(promoted)), c.end, c.from, c.to, c.matured)
		}
		if c.text != "" && c.w.PeriodText(end) != c.text {
			t.Errorf("%s: %q, want %q", c.name, c.w.PeriodText(end), c.text)
		}
	}
}

// With a label delay every message says which predictions were judged.
func TestJudgeSaysThePeriod(t *testing.T) {
	w := tenMinutes
	w.Delay = 2 * time.Hour
	r := Judge([]promq.Series{series("", 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8, 0.8)}, Threshold{Below: b(0.78)}, w, now)
	if want := "predictions of 2026-11-02 09:20 to 09:30 UTC: latest value 0.8 is not below 0.78"; r.Message != want {
		t.Errorf("message %q, want %q", r.Message, want)
	}
	r = Judge([]promq.Series{series("", 0.8, 0.8)}, Threshold{Below: b(0.78)}, tenMinutes, now)
	if strings.Contains(r.Message, "predictions of") {
		t.Errorf("without a delay the message names no period: %q", r.Message)
	}
}
