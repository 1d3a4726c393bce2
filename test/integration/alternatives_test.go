package integration

import (
	"testing"

	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"

	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// Too few fresh labels to retrain on: the line evaluates what it has (here
// only the rule-based version, the live one having no predecessor) against
// the live version on the golden set, and switches to it when it passes.
func TestAlternativesWhenDataIsShort(t *testing.T) {
	key := watchedLine(t, "alt-insufficient", nil)
	ns := key.Namespace
	stateAt(t, key, hm(4, 0), v1alpha1.TriggerFiring)
	job := waitJob(t, ns, "late-risk-rules-alt1")
	env := envOf(job.Spec.Template.Spec.Containers[0])
	if env["PLUMBLINE_CANDIDATE_URI"] != "s3://larkspur-models/late-risk/rules-2026-09.json" || env["PLUMBLINE_BASELINE_URI"] != initialURI {
		t.Errorf("alternative's evaluation env %v", env)
	}
	line := getLine(t, key)
	if a := line.Status.Alternatives; a == nil || a.Reason != "InsufficientData" || a.Against != initial || len(a.Candidates) != 1 {
		t.Fatalf("alternatives status %+v", line.Status.Alternatives)
	}
	if conditionIs(line.Status.Conditions, v1alpha1.ConditionNeedsReview) {
		t.Error("NeedsReview while an alternative is being evaluated")
	}
	waitEvent(t, ns, lineName, "EvaluatingAlternatives")
	if n := len(trainedVersions(t, ns)); n != 0 {
		t.Errorf("retrained on too little data: %d", n)
	}
	// The next evaluation, still firing, starts nothing new.
	stateAt(t, key, hm(4, 1), v1alpha1.TriggerFiring)

	succeedJob(t, ns, "late-risk-rules-alt1", encode(t, passingReport()))
	rules := waitPhase(t, ns, rulesName, v1alpha1.PhasePromoting)
	if rules.Status.Promotion.Kind != v1alpha1.PromotionAlternative {
		t.Errorf("kind %s", rules.Status.Promotion.Kind)
	}
	rollOutTo(t, ns, rulesName)
	waitPhase(t, ns, rulesName, v1alpha1.PhaseLive)
	line = waitLineCondition(t, key, v1alpha1.ConditionFallbackActive, metav1.ConditionTrue, "Alternative")
	if a := line.Status.Alternatives; a.Outcome != "Switched" || a.Chosen != rulesName || a.Candidates[0].Verdict != v1alpha1.GatePassed || a.Candidates[0].Score != "0.842" {
		t.Errorf("alternatives status %+v", a)
	}
	waitEvent(t, ns, lineName, "AlternativeChosen")
	waitEvent(t, ns, lineName, "AlternativeServing")
}

// A retrain that fails its gate while the live version is degraded: the
// alternatives are tried, none passes, and a person is asked to review.
func TestAlternativesNoneQualify(t *testing.T) {
	key := guardedLine(t, "alt-degraded")
	ns := key.Namespace
	guardAt(t, key, hm(3, 5))
	guardAt(t, key, hm(3, 11))
	waitLineCondition(t, key, v1alpha1.ConditionDegraded, metav1.ConditionTrue, "RegressedAfterProbation")

	clk.SetTime(hm(3, 20))
	requestRetrain(t, key, "degraded-retrain")
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseTraining)
	succeedJob(t, ns, "late-risk-v1-train", "")
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseEvaluating)
	failing := passingReport()
	setCandidate(&failing.Metrics[0], 0.7)
	succeedJob(t, ns, "late-risk-v1-gate", encode(t, failing))
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseRejected)

	waitJob(t, ns, "late-risk-rules-alt1")
	if a := getLine(t, key).Status.Alternatives; a == nil || a.Reason != "CandidateRejected" {
		t.Fatalf("alternatives %+v", a)
	}
	succeedJob(t, ns, "late-risk-rules-alt1", encode(t, failing))
	line := waitLineCondition(t, key, v1alpha1.ConditionNeedsReview, metav1.ConditionTrue, "NoAlternativeQualified")
	mustContain(t, "NeedsReview message", meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionNeedsReview).Message,
		"the retrained candidate failed its gate", "late-risk-rules: CriteriaNotMet", "a person should decide")
	if a := line.Status.Alternatives; a.Outcome != "NoneQualified" || a.Candidates[0].Verdict != v1alpha1.GateFailed {
		t.Errorf("alternatives %+v", a)
	}
	settle()
	if v := getVersion(t, ns, initial); v.Status.Phase != v1alpha1.PhaseLive {
		t.Errorf("v0 is %s", v.Status.Phase)
	}
}

// Under Manual approval the alternatives are evaluated as before, but the
// switch to the best one is left to a person: the line names it and the
// command, and nothing changes what serves until a person asks.
func TestAlternativesUnderManualWaitForAPerson(t *testing.T) {
	key := watchedLine(t, "alt-manual", func(o *unstructured.Unstructured) {
		mustSet(t, o, "spec.gate.approval", "Manual")
	})
	ns := key.Namespace
	stateAt(t, key, hm(4, 0), v1alpha1.TriggerFiring)
	waitJob(t, ns, "late-risk-rules-alt1")
	succeedJob(t, ns, "late-risk-rules-alt1", encode(t, passingReport()))
	line := waitLineCondition(t, key, v1alpha1.ConditionNeedsReview, metav1.ConditionTrue, "AlternativeNeedsPerson")
	mustContain(t, "NeedsReview message", meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionNeedsReview).Message,
		rulesName+" passed the gate", "spec.gate.withoutApproval", "kubectl plumbline rollback late-risk --to "+rulesName)
	if a := line.Status.Alternatives; a.Outcome != "LeftToPerson" || a.Chosen != "" {
		t.Errorf("alternatives %+v", a)
	}
	if err := expectCondition(line.Status.Conditions, v1alpha1.ConditionActionRequired, metav1.ConditionTrue, v1alpha1.ConditionNeedsReview); err != nil {
		t.Error(err)
	}
	settle()
	if v := getVersion(t, ns, rulesName); v.Status.Phase != v1alpha1.PhaseStandby {
		t.Fatalf("the rules are %s before a person asked", v.Status.Phase)
	}

	// A person takes the advice.
	setAnnotation(t, key, v1alpha1.RollbackRequestAnnotation, rulesName)
	rules := waitPhase(t, ns, rulesName, v1alpha1.PhasePromoting)
	if rules.Status.Promotion.Kind != v1alpha1.PromotionRequested {
		t.Errorf("kind %s, want Requested", rules.Status.Promotion.Kind)
	}
	rollOutTo(t, ns, rulesName)
	waitPhase(t, ns, rulesName, v1alpha1.PhaseLive)
	waitLineCondition(t, key, v1alpha1.ConditionNeedsReview, metav1.ConditionFalse, "Answered")
}
