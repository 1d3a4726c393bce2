package gate

import (
	"strings"
	"testing"

	"k8s.io/utils/ptr"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/contract/gatereport"
)

func metric(name, segment string, cand, lo, hi, conf float64) gatereport.Metric {
	return gatereport.Metric{Metric: name, Segment: segment, Candidate: ptr.To(cand), Baseline: ptr.To(cand - (lo+hi)/2),
		DeltaLow: ptr.To(lo), DeltaHigh: ptr.To(hi), Confidence: ptr.To(conf), Test: "bootstrap", N: 1000}
}

// report is a Larkspur late-risk evaluation: whole set plus two depots.
func report() *gatereport.Report {
	return &gatereport.Report{
		Schema: gatereport.Schema, Rows: 3000,
		Metrics: []gatereport.Metric{
			metric("roc_auc", "", 0.84, -0.003, 0.011, 0.95),
			metric("log_loss", "", 0.41, -0.02, 0.004, 0.95),
			metric("recall", "", 0.71, -0.01, 0.03, 0.95),
			metric("recall", "north", 0.74, -0.015, 0.02, 0.95),
			metric("recall", "harbour", 0.66, -0.04, 0.01, 0.95),
			metric("accuracy", "", 0.90, 0.002, 0.02, 0.90),
		},
		MustPass: gatereport.MustPass{Total: 40},
	}
}

func TestDecide(t *testing.T) {
	cases := []struct {
		name     string
		criteria []v1alpha1.GateCriterion
		mutate   func(*gatereport.Report)
		noBase   bool
		verdict  v1alpha1.GateVerdict
		reason   string
		results  int
		text     []string
	}{
		{"minimum met", []v1alpha1.GateCriterion{{Metric: "roc_auc", Minimum: ptr.To(0.80)}}, nil, false,
			v1alpha1.GatePassed, ReasonCriteriaMet, 1, []string{"all 1 criteria met on 3000 rows", "all 40 must-pass rows right"}},
		{"minimum met exactly", []v1alpha1.GateCriterion{{Metric: "roc_auc", Minimum: ptr.To(0.84)}}, nil, false,
			v1alpha1.GatePassed, ReasonCriteriaMet, 1, nil},
		{"minimum missed", []v1alpha1.GateCriterion{{Metric: "roc_auc", Minimum: ptr.To(0.85)}}, nil, false,
			v1alpha1.GateFailed, ReasonCriteriaNotMet, 1, []string{"roc_auc/whole set: roc_auc 0.84 < minimum 0.85"}},
		{"maximum met", []v1alpha1.GateCriterion{{Metric: "log_loss", Maximum: ptr.To(0.45)}}, nil, false,
			v1alpha1.GatePassed, ReasonCriteriaMet, 1, nil},
		{"maximum exceeded", []v1alpha1.GateCriterion{{Metric: "log_loss", Maximum: ptr.To(0.40)}}, nil, false,
			v1alpha1.GateFailed, ReasonCriteriaNotMet, 1, []string{"log_loss 0.41 > maximum 0.4"}},
		{"non-inferior", []v1alpha1.GateCriterion{{Metric: "roc_auc", MaxRegression: ptr.To(0.005), Confidence: ptr.To(0.95)}}, nil, false,
			v1alpha1.GatePassed, ReasonCriteriaMet, 1, nil},
		{"inferior", []v1alpha1.GateCriterion{{Metric: "roc_auc", MaxRegression: ptr.To(0.002), Confidence: ptr.To(0.95)}}, nil, false,
			v1alpha1.GateFailed, ReasonCriteriaNotMet, 1, []string{"lower bound of the change in roc_auc -0.003 < -0.002 (maxRegression, 95%)"}},
		{"no worse at all", []v1alpha1.GateCriterion{{Metric: "accuracy", MaxRegression: ptr.To(0.0), Confidence: ptr.To(0.9)}}, nil, false,
			v1alpha1.GatePassed, ReasonCriteriaMet, 1, nil},
		{"lower better, non-inferior", []v1alpha1.GateCriterion{{Metric: "log_loss", MaxRegression: ptr.To(0.005)}}, nil, false,
			v1alpha1.GatePassed, ReasonCriteriaMet, 1, nil},
		{"lower better, inferior", []v1alpha1.GateCriterion{{Metric: "log_loss", MaxRegression: ptr.To(0.003)}}, nil, false,
			v1alpha1.GateFailed, ReasonCriteriaNotMet, 1, []string{"upper bound of the change in log_loss 0.004 > 0.003"}},
		{"own metric, lower better", []v1alpha1.GateCriterion{{Metric: "late_minutes", Better: v1alpha1.LowerBetter, MaxRegression: ptr.To(1.0)}},
			func(r *gatereport.Report) {
				r.Metrics = append(r.Metrics, metric("late_minutes", "", 12, -0.5, 1.5, 0.95))
			}, false,
			v1alpha1.GateFailed, ReasonCriteriaNotMet, 1, []string{"upper bound of the change in late_minutes 1.5 > 1"}},
		{"interval at too low a confidence", []v1alpha1.GateCriterion{{Metric: "accuracy", MaxRegression: ptr.To(0.01), Confidence: ptr.To(0.95)}}, nil, false,
			v1alpha1.GateFailed, ReasonCriteriaNotMet, 1, []string{"at 90% confidence; the criterion asks for 95%"}},
		{"interval at a higher confidence is fine", []v1alpha1.GateCriterion{{Metric: "roc_auc", MaxRegression: ptr.To(0.005), Confidence: ptr.To(0.9)}}, nil, false,
			v1alpha1.GatePassed, ReasonCriteriaMet, 1, nil},
		{"default confidence", []v1alpha1.GateCriterion{{Metric: "accuracy", MaxRegression: ptr.To(0.01)}}, nil, false,
			v1alpha1.GateFailed, ReasonCriteriaNotMet, 1, []string{"asks for 95%"}},
		{"no interval in report", []v1alpha1.GateCriterion{{Metric: "roc_auc", MaxRegression: ptr.To(0.01)}},
			func(r *gatereport.Report) { r.Metrics[0].DeltaLow = nil }, false,
			v1alpha1.GateFailed, ReasonCriteriaNotMet, 1, []string{"no deltaLow for roc_auc"}},
		{"no confidence in report", []v1alpha1.GateCriterion{{Metric: "roc_auc", MaxRegression: ptr.To(0.01)}},
			func(r *gatereport.Report) { r.Metrics[0].Confidence = nil }, false,
			v1alpha1.GateFailed, ReasonCriteriaNotMet, 1, []string{"no confidence"}},
		{"no baseline: regression not applied", []v1alpha1.GateCriterion{{Metric: "roc_auc", MaxRegression: ptr.To(0.0001)}, {Metric: "roc_auc", Minimum: ptr.To(0.8)}}, nil, true,
			v1alpha1.GatePassed, ReasonCriteriaMet, 2, nil},
		{"no baseline: minimum still applies", []v1alpha1.GateCriterion{{Metric: "roc_auc", MaxRegression: ptr.To(0.0001), Minimum: ptr.To(0.9)}}, nil, true,
			v1alpha1.GateFailed, ReasonCriteriaNotMet, 1, []string{"minimum 0.9", "maxRegression not applied"}},
		{"named segment", []v1alpha1.GateCriterion{{Metric: "recall", Segment: "north", Minimum: ptr.To(0.7)}}, nil, false,
			v1alpha1.GatePassed, ReasonCriteriaMet, 1, nil},
		{"named segment missing", []v1alpha1.GateCriterion{{Metric: "recall", Segment: "lakeside", Minimum: ptr.To(0.7)}}, nil, false,
			v1alpha1.GateFailed, ReasonCriteriaNotMet, 1, []string{`the report has no recall for segment "lakeside"`}},
		{"every segment, one fails", []v1alpha1.GateCriterion{{Metric: "recall", Segment: "*", MaxRegression: ptr.To(0.02)}}, nil, false,
			v1alpha1.GateFailed, ReasonCriteriaNotMet, 2, []string{"1 of 2 criteria not met", `recall/segment "harbour"`}},
		{"every segment, all pass", []v1alpha1.GateCriterion{{Metric: "recall", Segment: "*", MaxRegression: ptr.To(0.05)}}, nil, false,
			v1alpha1.GatePassed, ReasonCriteriaMet, 2, []string{"all 2 criteria met"}},
		{"every segment, metric missing in one", []v1alpha1.GateCriterion{{Metric: "recall", Segment: "*", MaxRegression: ptr.To(0.05)}},
			func(r *gatereport.Report) {
				r.Metrics = append(r.Metrics, metric("roc_auc", "lakeside", 0.8, 0, 0.01, 0.95))
			}, false,
			v1alpha1.GateFailed, ReasonCriteriaNotMet, 3, []string{`no recall for segment "lakeside"`}},
		{"every segment, no segments", []v1alpha1.GateCriterion{{Metric: "roc_auc", Segment: "*", Minimum: ptr.To(0.5)}},
			func(r *gatereport.Report) { r.Metrics = r.Metrics[:3] }, false,
			v1alpha1.GateFailed, ReasonCriteriaNotMet, 1, []string{"report has no segments"}},
		{"every segment, truncated report", []v1alpha1.GateCriterion{{Metric: "recall", Segment: "*", MaxRegression: ptr.To(0.05)}},
			func(r *gatereport.Report) { r.Truncated = true }, false,
			v1alpha1.GateFailed, ReasonCriteriaNotMet, 1, []string{"truncated"}},
		{"metric not in report", []v1alpha1.GateCriterion{{Metric: "mcc", Minimum: ptr.To(0.3)}}, nil, false,
			v1alpha1.GateFailed, ReasonCriteriaNotMet, 1, []string{"the report has no mcc for whole set"}},
		{"undefined metric", []v1alpha1.GateCriterion{{Metric: "roc_auc", Minimum: ptr.To(0.5)}},
			func(r *gatereport.Report) { r.Metrics[0].Candidate = nil; r.Metrics[0].Undefined = "only one class" }, false,
			v1alpha1.GateFailed, ReasonCriteriaNotMet, 1, []string{"roc_auc is undefined for whole set: only one class"}},
		{"must-pass failure rejects even when criteria pass", []v1alpha1.GateCriterion{{Metric: "roc_auc", Minimum: ptr.To(0.8)}},
			func(r *gatereport.Report) {
				r.MustPass.Failed = 2
				r.MustPass.FailedIDs = []string{"parcel-17", "parcel-99"}
			}, false,
			v1alpha1.GateFailed, ReasonMustPassFailed, 1, []string{"2 of 40 must-pass rows wrong", "parcel-17, parcel-99"}},
		{"several criteria, all listed", []v1alpha1.GateCriterion{
			{Metric: "roc_auc", Minimum: ptr.To(0.8)}, {Metric: "roc_auc", MaxRegression: ptr.To(0.005)},
			{Metric: "log_loss", Maximum: ptr.To(0.3)}, {Metric: "recall", Segment: "*", MaxRegression: ptr.To(0.02)}}, nil, false,
			v1alpha1.GateFailed, ReasonCriteriaNotMet, 5, []string{"2 of 5 criteria not met", "log_loss", "harbour"}},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			rep := report()
			if tc.mutate != nil {
				tc.mutate(rep)
			}
			got := Decide(tc.criteria, rep, !tc.noBase)
			if got.Verdict != tc.verdict || got.Reason != tc.reason {
				t.Errorf("verdict %s/%s (%s), want %s/%s", got.Verdict, got.Reason, got.Message, tc.verdict, tc.reason)
			}
			if len(got.Criteria) != tc.results {
				t.Errorf("%d results, want %d: %+v", len(got.Criteria), tc.results, got.Criteria)
			}
			for _, w := range tc.text {
				if !strings.Contains(got.Message, w) {
					t.Errorf("message %q lacks %q", got.Message, w)
				}
			}
			// A passed verdict has every result passed; a failed one (for
			// criteria) at least one failed.
			nFailed := 0
			for _, r := range got.Criteria {
				if !r.Passed {
					nFailed++
				}
			}
			if got.Reason == ReasonCriteriaMet && nFailed != 0 || got.Reason == ReasonCriteriaNotMet && nFailed == 0 {
				t.Errorf("verdict %s disagrees with %d failed results", got.Reason, nFailed)
			}
		})
	}
}

func TestDecideRecordsNumbers(t *testing.T) {
	got := Decide([]v1alpha1.GateCriterion{{Metric: "roc_auc", MaxRegression: ptr.To(0.005)}}, report(), true)
	r := got.Criteria[0]
	if r.Candidate != "0.84" || r.DeltaLow != "-0.003" || r.DeltaHigh != "0.011" || r.Baseline == "" {
		t.Errorf("numbers not recorded: %+v", r)
	}
	if got.Rows != 3000 {
		t.Errorf("rows %d", got.Rows)
	}
}

func TestDecideBoundsResults(t *testing.T) {
	rep := report()
	for i := 0; i < 300; i++ {
		rep.Metrics = append(rep.Metrics, metric("recall", "depot-"+strings.Repeat("x", i%7)+string(rune('a'+i%26))+string(rune('a'+i/26)), 0.7, 0, 0.01, 0.95))
	}
	got := Decide([]v1alpha1.GateCriterion{{Metric: "recall", Segment: "*", Minimum: ptr.To(0.72)}}, rep, true)
	if len(got.Criteria) > maxResults {
		t.Errorf("%d results kept; at most %d fit in status", len(got.Criteria), maxResults)
	}
	if got.Verdict != v1alpha1.GateFailed || len(got.Message) > 4096 {
		t.Errorf("verdict %s, message of %d bytes", got.Verdict, len(got.Message))
	}
}
