package integration

import (
	"fmt"
	"os/exec"
	"strings"
	"testing"

	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/contract/gatereport"
)

// Each candidate whose report fails a criterion, or whose report cannot be
// judged, is rejected with a reason that names the problem, and the live
// version and the Deployment are left alone. The candidates run one after
// another on one line, so this also shows the line working through them.
func TestGateRejects(t *testing.T) {
	ns := "gate-rejects"
	key := liveLine(t, ns, func(o *unstructured.Unstructured) { mustSet(t, o, "spec.historyLimit", int64(100)) })
	gen := deployment(t, ns).Generation

	mod := func(change func(r *gatereport.Report)) string {
		r := passingReport()
		change(r)
		return encode(t, r)
	}
	cases := []struct {
		name   string
		report string
		failed bool // the evaluation Job itself failed
		reason string
		text   []string
	}{
		{"minimum", mod(func(r *gatereport.Report) { setCandidate(&r.Metrics[0], 0.79) }),
			false, "CriteriaNotMet", []string{"roc_auc/whole set: roc_auc 0.79 < minimum 0.8"}},
		{"maximum", mod(func(r *gatereport.Report) { setCandidate(&r.Metrics[1], 0.52) }),
			false, "CriteriaNotMet", []string{"log_loss 0.52 > maximum 0.45"}},
		{"non-inferiority", mod(func(r *gatereport.Report) { r.Metrics[0].DeltaLow = f(-0.011) }),
			false, "CriteriaNotMet", []string{"lower bound of the change in roc_auc -0.011 < -0.005"}},
		{"interval at too low a confidence", mod(func(r *gatereport.Report) { r.Metrics[0].Confidence = f(0.9) }),
			false, "CriteriaNotMet", []string{"at 90% confidence; the criterion asks for 95%"}},
		{"every segment", mod(func(r *gatereport.Report) { r.Metrics[4].DeltaLow = f(-0.031) }),
			false, "CriteriaNotMet", []string{`recall/segment "harbour-depot"`, "-0.031 < -0.02"}},
		{"metric missing", mod(func(r *gatereport.Report) { r.Metrics = append(r.Metrics[:1], r.Metrics[2:]...) }),
			false, "CriteriaNotMet", []string{"the report has no log_loss for whole set"}},
		{"must-pass row wrong", mod(func(r *gatereport.Report) {
			r.MustPass.Failed = 2
			r.MustPass.FailedIDs = []string{"parcel-LK-1187", "parcel-LK-2204"}
		}), false, "MustPassFailed", []string{"2 of 40 must-pass rows wrong", "parcel-LK-1187"}},
		{"report contradicts itself", mod(func(r *gatereport.Report) { r.Metrics[0].Candidate = f(0.79) }),
			false, gatereport.ReasonMalformed, []string{"metrics[0].delta is 0.006, but candidate - baseline is 0.79 - 0.836 = -0.046"}},
		{"report missing", "", false, gatereport.ReasonMissing, []string{"wrote no report"}},
		{"report malformed", `{"schema":"plumbline.dev/gate-report/v1","rows":5000,"metrics":[{"metric":"roc_auc"`,
			false, gatereport.ReasonMalformed, []string{"not a valid gate report"}},
		{"unknown field", strings.Replace(encode(t, passingReport()), `"deltaLow"`, `"lowerBound"`, 1),
			false, gatereport.ReasonMalformed, []string{`unknown field "lowerBound"`}},
		{"unknown schema", strings.Replace(encode(t, passingReport()), "gate-report/v1", "gate-report/v7", 1),
			false, gatereport.ReasonUnknownSchema, []string{`"plumbline.dev/gate-report/v7"`}},
		{"report too large", `{"schema":"plumbline.dev/gate-report/v1","padding":"` + strings.Repeat("x", 4100) + `"}`,
			false, gatereport.ReasonTooLarge, []string{"at most 4096"}},
		{"evaluation Job failed", "golden set s3://larkspur-golden/late-risk.parquet: no such key",
			true, "EvaluationFailed", []string{"BackoffLimitExceeded", "no such key"}},
	}
	for i, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			name := fmt.Sprintf("late-risk-v%d", i+1)
			requestRetrain(t, key, fmt.Sprintf("gate-case-%d", i))
			waitPhase(t, ns, name, v1alpha1.PhaseTraining)
			succeedJob(t, ns, name+"-train", "")
			waitPhase(t, ns, name, v1alpha1.PhaseEvaluating)
			if tc.failed {
				failJob(t, ns, name+"-gate", "BackoffLimitExceeded", "Job has reached the specified backoff limit", tc.report)
			} else {
				succeedJob(t, ns, name+"-gate", tc.report)
			}
			v := waitPhase(t, ns, name, v1alpha1.PhaseRejected)
			if v.Status.Reason != tc.reason || v.Status.Gate == nil || v.Status.Gate.Verdict != v1alpha1.GateFailed || v.Status.Gate.Reason != tc.reason {
				t.Fatalf("status reason %q, gate %+v; want %s", v.Status.Reason, v.Status.Gate, tc.reason)
			}
			mustContain(t, "gate message", v.Status.Gate.Message, tc.text...)
			if err := expectCondition(v.Status.Conditions, v1alpha1.ConditionGatePassed, metav1.ConditionFalse, tc.reason); err != nil {
				t.Error(err)
			}
			line := waitLineCondition(t, key, v1alpha1.ConditionRetraining, metav1.ConditionFalse, "GateFailed")
			if line.Status.LiveVersion != initial {
				t.Errorf("live version moved to %s", line.Status.LiveVersion)
			}
			if a, ver := served(t, ns); a != initialURI || ver != initial || deployment(t, ns).Generation != gen {
				t.Errorf("Deployment touched: serves %s / %s, generation %d (was %d)", a, ver, deployment(t, ns).Generation, gen)
			}
		})
	}
	// A script waits for a version to settle, whatever the outcome: a
	// rejected candidate settles (its Live condition never comes).
	if err := expectCondition(getVersion(t, ns, "late-risk-v1").Status.Conditions, v1alpha1.ConditionSettled, metav1.ConditionTrue, string(v1alpha1.PhaseRejected)); err != nil {
		t.Error(err)
	}
	if kubectl, err := exec.LookPath("kubectl"); err == nil && kubeconfigPath != "" {
		out, err := exec.Command(kubectl, "--kubeconfig", kubeconfigPath, "-n", ns, "wait", "modelversion/late-risk-v1",
			"--for=condition=Settled", "--timeout=20s").CombinedOutput()
		if err != nil || !strings.Contains(string(out), "condition met") {
			t.Errorf("kubectl wait --for=condition=Settled on a rejected candidate: %v\n%s", err, out)
		}
	}
	ev := waitEvent(t, ns, lineName, "GateFailed")
	if ev.Type != "Warning" {
		t.Errorf("GateFailed event type %s", ev.Type)
	}
	if got := metricValue(t, "plumbline_gate_decisions_total", map[string]string{"namespace": ns, "result": "Failed", "reason": "CriteriaNotMet"}); got != 6 {
		t.Errorf("gate decisions Failed/CriteriaNotMet = %v, want 6", got)
	}
}
