package modelline

import (
	"strings"
	"testing"
	"time"

	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/contract/checkreport"
	"plumbline.dev/plumbline/internal/engine/policy"
)

func TestUsableCheck(t *testing.T) {
	now := time.Date(2026, 11, 2, 4, 0, 0, 0, time.UTC)
	at := func(d time.Duration) *metav1.Time { return &metav1.Time{Time: now.Add(d)} }
	cases := []struct {
		name string
		st   *v1alpha1.CheckRunStatus
		want bool
	}{
		{"none", nil, false},
		{"running", &v1alpha1.CheckRunStatus{Number: 1}, true},
		{"fresh", &v1alpha1.CheckRunStatus{Number: 1, FinishedTime: at(-59 * time.Minute)}, true},
		{"stale", &v1alpha1.CheckRunStatus{Number: 1, FinishedTime: at(-61 * time.Minute)}, false},
		{"used", &v1alpha1.CheckRunStatus{Number: 1, FinishedTime: at(-time.Minute), Used: true}, false},
	}
	for _, c := range cases {
		if got := usableCheck(c.st, now); got != c.want {
			t.Errorf("%s: usable %v, want %v", c.name, got, c.want)
		}
	}
}

func TestSpendsCheck(t *testing.T) {
	known := &v1alpha1.CheckRunStatus{Number: 1, DataQuality: v1alpha1.CheckOK, Drift: v1alpha1.CheckNotDetected}
	unusable := &v1alpha1.CheckRunStatus{Number: 1, DataQuality: v1alpha1.CheckUnknown, Drift: v1alpha1.CheckUnknown}
	cases := []struct {
		path, outcome string
		st            *v1alpha1.CheckRunStatus
		want          bool
	}{
		{pathTrigger, outcomeStarted, known, true},
		{pathTrigger, outcomeNoDrift, known, false},      // kept: the trigger fires again next minute
		{pathSchedule, outcomeDataQuality, known, false}, // kept while fresh
		{pathManual, outcomeDataQuality, known, true},    // asking again means looking again
		{pathManual, outcomeChecksUnknown, known, false}, // PromQL held it back: the report still answers
		{pathTrigger, outcomeChecksUnknown, unusable, true},
		{pathTrigger, outcomeStarted, nil, false},
	}
	for _, c := range cases {
		if got := spendsCheck(c.path, c.outcome, c.st); got != c.want {
			t.Errorf("%s/%s: spends %v, want %v", c.path, c.outcome, got, c.want)
		}
	}
}

// A report's answers become checks beside the PromQL ones: decideStart
// refuses broken data, and asks for a review when the report saw no drift.
func TestCheckAnswersDecide(t *testing.T) {
	share, limit := 0.197, 0.05
	rep := &checkreport.Report{Schema: checkreport.Schema, Rows: 20000, ReferenceRows: 20000,
		DataQuality: checkreport.Quality{OK: false, Findings: []checkreport.Finding{{Check: "missing", Column: "postcode", Count: 3949, Share: &share, Limit: &limit, Example: "current.csv:2"}}},
		Drift:       checkreport.Drift{Limit: 0.25}}
	rows := rep.Rows
	st := &v1alpha1.CheckRunStatus{Number: 2, Job: "late-risk-check-2", DataQuality: v1alpha1.CheckFailed, Drift: v1alpha1.CheckNotDetected, Rows: &rows, Message: summarise(rep)}
	jc := answers(st)
	v := policy.DecideStart(pathTrigger, checkResults{DataQuality: []check{jc.dataQuality}, Drift: []check{jc.drift}})
	if v.Outcome != outcomeDataQuality || !strings.Contains(v.Message, "missing postcode (3949 rows, 19.7%, e.g. current.csv:2)") {
		t.Errorf("broken data: %s %q", v.Outcome, v.Message)
	}
	st.DataQuality = v1alpha1.CheckOK
	st.Message = "20000 rows against 20000 in the reference; data quality ok; no drift to act on (the drifted features carry 0 of the weight, limit 0.25)"
	jc = answers(st)
	v = policy.DecideStart(pathTrigger, checkResults{DataQuality: []check{jc.dataQuality}, Drift: []check{jc.drift}})
	if v.Outcome != outcomeNoDrift || !strings.Contains(v.Message, "check Job late-risk-check-2: 20000 rows") {
		t.Errorf("no drift: %s %q", v.Outcome, v.Message)
	}
	st.Drift = v1alpha1.CheckDetected
	jc = answers(st)
	if v := policy.DecideStart(pathTrigger, checkResults{DataQuality: []check{jc.dataQuality}, Drift: []check{check{Kind: "drift", Name: "depot-shift", Known: true, Value: 0.05}, jc.drift}}); v.Outcome != outcomeStarted {
		t.Errorf("drift in the report, none in PromQL: %s %q, want a start", v.Outcome, v.Message)
	}
	// Rows as fresh data.
	fresh := jc.rows
	fresh.Breached = fresh.Value < 50000
	if v := policy.DecideStart(pathSchedule, checkResults{FreshData: &fresh, AtLeast: 50000}); v.Outcome != outcomeInsufficient || !strings.Contains(v.Message, "saw 20000 new rows, below the 50000") {
		t.Errorf("rows below atLeast: %s %q", v.Outcome, v.Message)
	}
	// An unusable report answers Unknown, and the start waits.
	bad := &v1alpha1.CheckRunStatus{Number: 3, Job: "late-risk-check-3", DataQuality: v1alpha1.CheckUnknown, Drift: v1alpha1.CheckUnknown, Message: "CheckReportMalformed: not a valid check report"}
	jc = answers(bad)
	if v := policy.DecideStart(pathManual, checkResults{DataQuality: []check{jc.dataQuality}}); v.Outcome != outcomeChecksUnknown || !strings.Contains(v.Message, "CheckReportMalformed") {
		t.Errorf("unusable report: %s %q", v.Outcome, v.Message)
	}
}

func TestSummarise(t *testing.T) {
	psi := 2.8
	rep := &checkreport.Report{Rows: 100, ReferenceRows: 120, DataQuality: checkreport.Quality{OK: true},
		Drift: checkreport.Drift{Detected: true, DriftedWeight: 0.4, Limit: 0.25, Features: []checkreport.Feature{{Feature: "depot", PSI: &psi, Drifted: true}, {Feature: "weight_kg"}}}}
	got := summarise(rep)
	want := "100 rows against 120 in the reference; data quality ok; drift detected (the drifted features carry 0.4 of the weight, limit 0.25): depot"
	if got != want {
		t.Errorf("summary %q\nwant    %q", got, want)
	}
}
