package schedule

import (
	"testing"
	"time"
)

func at(s string) time.Time {
	t, err := time.Parse(time.RFC3339, s)
	if err != nil {
		panic(err)
	}
	return t
}

func sec(n int64) *int64 { return &n }

func TestCompute(t *testing.T) {
	cases := []struct {
		name       string
		cron, zone string
		last, now  string
		deadline   *int64
		due        string // "" for none
		latest     string
		missed     int
		more       bool
		next       string
	}{
		{name: "not yet due", cron: "30 2 * * 1", last: "2026-11-02T02:30:00Z", now: "2026-11-05T12:00:00Z",
			next: "2026-11-09T02:30:00Z"},
		{name: "due now", cron: "30 2 * * 1", last: "2026-11-02T02:30:00Z", now: "2026-11-09T02:30:00Z",
			due: "2026-11-09T02:30:00Z", latest: "2026-11-09T02:30:00Z", next: "2026-11-16T02:30:00Z"},
		{name: "due a little late", cron: "30 2 * * 1", last: "2026-11-02T02:30:00Z", now: "2026-11-09T02:41:00Z", deadline: sec(3600),
			due: "2026-11-09T02:30:00Z", latest: "2026-11-09T02:30:00Z", next: "2026-11-16T02:30:00Z"},
		{name: "past the deadline", cron: "30 2 * * 1", last: "2026-11-02T02:30:00Z", now: "2026-11-09T04:00:00Z", deadline: sec(3600),
			latest: "2026-11-09T02:30:00Z", missed: 1, next: "2026-11-16T02:30:00Z"},
		{name: "no deadline: late is fine", cron: "30 2 * * 1", last: "2026-11-02T02:30:00Z", now: "2026-11-12T04:00:00Z",
			due: "2026-11-09T02:30:00Z", latest: "2026-11-09T02:30:00Z", next: "2026-11-16T02:30:00Z"},
		{name: "three missed, one catch-up", cron: "0 * * * *", last: "2026-11-02T06:00:00Z", now: "2026-11-02T09:20:00Z",
			due: "2026-11-02T09:00:00Z", latest: "2026-11-02T09:00:00Z", missed: 2, next: "2026-11-02T10:00:00Z"},
		{name: "missed, latest past deadline", cron: "0 * * * *", last: "2026-11-02T06:00:00Z", now: "2026-11-02T09:20:00Z", deadline: sec(600),
			latest: "2026-11-02T09:00:00Z", missed: 3, next: "2026-11-02T10:00:00Z"},
		{name: "time zone", cron: "30 2 * * *", zone: "America/New_York", last: "2026-11-02T07:30:00Z", now: "2026-11-03T08:00:00Z",
			due: "2026-11-03T07:30:00Z", latest: "2026-11-03T07:30:00Z", next: "2026-11-04T07:30:00Z"},
		{name: "daylight saving ends in London", cron: "30 2 * * *", zone: "Europe/London", last: "2026-10-24T01:30:00Z", now: "2026-10-25T12:00:00Z",
			due: "2026-10-25T02:30:00Z", latest: "2026-10-25T02:30:00Z", next: "2026-10-26T02:30:00Z"},
		{name: "descriptor", cron: "@daily", last: "2026-11-01T00:00:00Z", now: "2026-11-02T00:00:30Z",
			due: "2026-11-02T00:00:00Z", latest: "2026-11-02T00:00:00Z", next: "2026-11-03T00:00:00Z"},
		{name: "long outage", cron: "* * * * *", last: "2026-10-01T00:00:00Z", now: "2026-11-02T09:30:30Z",
			due: "2026-11-02T09:30:00Z", latest: "2026-11-02T09:30:00Z", missed: 999, more: true, next: "2026-11-02T09:31:00Z"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			p, err := Compute(c.cron, c.zone, at(c.last), at(c.now), c.deadline)
			if err != nil {
				t.Fatal(err)
			}
			if got := fmtT(p.Due); got != c.due {
				t.Errorf("due %s, want %s", got, c.due)
			}
			if got := fmtT(p.Latest); got != c.latest {
				t.Errorf("latest %s, want %s", got, c.latest)
			}
			if p.Missed != c.missed || p.MissedMore != c.more {
				t.Errorf("missed %d (more %v), want %d (%v)", p.Missed, p.MissedMore, c.missed, c.more)
			}
			if got := p.Next.UTC().Format(time.RFC3339); got != c.next {
				t.Errorf("next %s, want %s", got, c.next)
			}
		})
	}
}

func fmtT(t *time.Time) string {
	if t == nil {
		return ""
	}
	return t.UTC().Format(time.RFC3339)
}

func TestComputeRejectsBadSpec(t *testing.T) {
	if _, err := Compute("61 * * * *", "", time.Now(), time.Now(), nil); err == nil {
		t.Error("bad cron accepted")
	}
	if _, err := Compute("0 * * * *", "Nowhere/Land", time.Now(), time.Now(), nil); err == nil {
		t.Error("bad zone accepted")
	}
}
