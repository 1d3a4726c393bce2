package integration

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"os/exec"
	"strings"
	"sync"
	"testing"

	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/tools/ctl"
)

// kubectlPlumbline runs `kubectl plumbline` against the test cluster with
// the admin kubeconfig, as a person would.
func kubectlPlumbline(t *testing.T, ns string, args ...string) (string, error) {
	t.Helper()
	var out, errOut bytes.Buffer
	args = append(args, "--kubeconfig", kubeconfigPath, "-n", ns)
	err := ctl.Run(context.Background(), args, &out, &errOut, nil)
	if errors.Is(err, ctl.ErrUsage) {
		t.Fatalf("kubectl plumbline %v: usage: %s", args, errOut.String())
	}
	return out.String(), err
}

func mustRun(t *testing.T, ns string, args ...string) string {
	t.Helper()
	out, err := kubectlPlumbline(t, ns, args...)
	if err != nil {
		t.Fatalf("kubectl plumbline %v: %v", args, err)
	}
	return out
}

// A person's day with a Manual line, through kubectl plumbline: ask for a
// retrain, read the status, approve the candidate, see the history, cancel
// a queued retrain, roll back by hand; and the refusals that name the fix.
func TestKubectlPlumbline(t *testing.T) {
	ns := "kubectl-plugin"
	key := liveLine(t, ns, func(o *unstructured.Unstructured) { mustSet(t, o, "spec.gate.approval", "Manual") })

	out := mustRun(t, ns, "retrain", lineName, "--token", "first")
	mustContain(t, "retrain output", out, "asked late-risk for a retrain (token first)")
	if _, err := kubectlPlumbline(t, ns, "retrain", lineName, "--token", "first"); err == nil || !strings.Contains(err.Error(), "already used") {
		t.Errorf("a reused token: %v, want a refusal", err)
	}
	trainAndPass(t, ns, "late-risk-v1")
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseAwaitingApproval)
	waitLineCondition(t, key, v1alpha1.ConditionAwaitingApproval, metav1.ConditionTrue, "WaitingForDecision")

	out = mustRun(t, ns, "status")
	mustContain(t, "status table", out, "LINE", "IN FLIGHT", "AWAITING APPROVAL", "late-risk", initial, "late-risk-v1")
	if lines := strings.Split(out, "\n"); len(lines) < 2 || strings.Count(lines[1], "late-risk-v1") != 2 {
		t.Errorf("the line's row does not name late-risk-v1 as in flight and awaiting approval:\n%s", out)
	}
	out = mustRun(t, ns, "status", lineName)
	mustContain(t, "status of the line", out, "ModelLine kubectl-plugin/late-risk", "Live:       "+initial,
		"In flight:  late-risk-v1", "Waiting for a person: late-risk-v1 passed the gate", "AwaitingApproval", "WaitingForDecision")
	if kubectl, err := exec.LookPath("kubectl"); err == nil {
		got, err := exec.Command(kubectl, "--kubeconfig", kubeconfigPath, "-n", ns, "get", "mline").CombinedOutput()
		if err != nil || !strings.Contains(string(got), "AWAITING APPROVAL") || !strings.Contains(string(got), "True") {
			t.Errorf("kubectl get mline does not show the candidate waiting: %v\n%s", err, got)
		}
	}

	// kubectl's habits: every namespace, more columns, the objects.
	out = mustRun(t, ns, "status", "-A", "-o", "wide")
	mustContain(t, "status -A -o wide", out, "NAMESPACE", "BLOCKED", "NEEDS REVIEW", "NEXT SCHEDULE", ns+" ")
	var lines v1alpha1.ModelLineList
	if err := json.Unmarshal([]byte(mustRun(t, ns, "status", "-o", "json")), &lines); err != nil || lines.Kind != "ModelLineList" ||
		len(lines.Items) != 1 || lines.Items[0].Kind != "ModelLine" || lines.Items[0].Status.ActiveVersion != "late-risk-v1" {
		t.Errorf("status -o json: %v, %+v", err, lines.TypeMeta)
	}
	out = mustRun(t, ns, "status", lineName, "-o", "yaml")
	mustContain(t, "status LINE -o yaml", out, "kind: ModelLine\n", "activeVersion: late-risk-v1")
	if strings.Contains(out, "managedFields") {
		t.Error("-o yaml shows managedFields")
	}
	var versions v1alpha1.ModelVersionList
	if err := json.Unmarshal([]byte(mustRun(t, ns, "history", lineName, "-o", "json")), &versions); err != nil || len(versions.Items) != 3 { // the imported version, the rules and late-risk-v1
		t.Errorf("history -o json: %v, %d versions", err, len(versions.Items))
	}
	// explain says what the line waits for and what to do.
	out = mustRun(t, ns, "explain", lineName)
	mustContain(t, "explain", out, "What can start a retrain", "What holds a retrain back", "late-risk-v1 is AwaitingApproval",
		"What a person could do", "AwaitingApproval (WaitingForDecision)", "kubectl plumbline approve late-risk-v1")
	// --watch prints the line's row again when it changes.
	watchCtx, stopWatch := context.WithCancel(context.Background())
	watched := &lockedBuffer{}
	watchDone := make(chan error, 1)
	go func() {
		watchDone <- ctl.Run(watchCtx, []string{"status", "--watch", "--kubeconfig", kubeconfigPath, "-n", ns}, watched, watched, nil)
	}()
	eventually(t, waitFor, func() error {
		if !strings.Contains(watched.String(), "AWAITING APPROVAL") {
			return errors.New("no table yet")
		}
		return nil
	})

	if _, err := kubectlPlumbline(t, ns, "approve", initial); err == nil || !strings.Contains(err.Error(), "AwaitingApproval") {
		t.Errorf("approving the live version: %v, want a refusal naming AwaitingApproval", err)
	}
	out = mustRun(t, ns, "approve", "late-risk-v1", "--note", "north depot checked")
	mustContain(t, "approve output", out, "late-risk-v1 approved")
	v1 := waitPhase(t, ns, "late-risk-v1", v1alpha1.PhasePromoting)
	if v1.Spec.Decision != v1alpha1.DecisionApproved || v1.Spec.DecisionNote != "north depot checked" {
		t.Errorf("decision %q note %q", v1.Spec.Decision, v1.Spec.DecisionNote)
	}
	if v1.Status.Number != 1 {
		t.Errorf("status.number %d, want 1", v1.Status.Number)
	}
	rollOutTo(t, ns, "late-risk-v1")
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseLive)
	eventually(t, waitFor, func() error {
		// A row that shows late-risk-v1 live: the watch saw the change.
		for _, l := range strings.Split(watched.String(), "\n") {
			if f := strings.Fields(l); len(f) > 2 && f[0] == lineName && f[1] == "late-risk-v1" {
				return nil
			}
		}
		return errors.New("the watch printed no row with late-risk-v1 live:\n" + watched.String())
	})
	stopWatch()
	if err := <-watchDone; err != nil {
		t.Errorf("status --watch: %v", err)
	}

	out = mustRun(t, ns, "history", lineName)
	mustContain(t, "history", out, "VERSION", "late-risk-v1", "Live (serving)", "Passed", "Manual", initial, "Archived")
	if strings.Index(out, "late-risk-v1") > strings.Index(out, initial+" ") {
		t.Errorf("history is not newest first:\n%s", out)
	}

	// A retrain asked for and then cancelled before it is judged.
	mustRun(t, ns, "retrain", lineName, "--token", "second")
	waitPhase(t, ns, "late-risk-v2", v1alpha1.PhaseTraining)
	mustRun(t, ns, "reject", "late-risk-v2", "--note", "asked by mistake")
	waitPhase(t, ns, "late-risk-v2", v1alpha1.PhaseRejected)

	// Back to the imported version by hand.
	if _, err := kubectlPlumbline(t, ns, "rollback", lineName); err == nil || !strings.Contains(err.Error(), "--to is required") {
		t.Errorf("rollback without --to: %v", err)
	}
	if _, err := kubectlPlumbline(t, ns, "rollback", lineName, "--to", "late-risk-v2"); err == nil || !strings.Contains(err.Error(), "archived version or the rule-based one") {
		t.Errorf("rollback to a rejected version: %v, want a refusal", err)
	}
	out = mustRun(t, ns, "rollback", lineName, "--to", initial)
	mustContain(t, "rollback output", out, "asked late-risk to serve "+initial+" again")
	waitPhase(t, ns, initial, v1alpha1.PhasePromoting)
	rollOutTo(t, ns, initial)
	waitPhase(t, ns, initial, v1alpha1.PhaseLive)
	if a, _ := served(t, ns); a != initialURI {
		t.Errorf("Deployment serves %s after the rollback", a)
	}
	// Forward to v1 and back to the imported version again: the same
	// version twice, each request its own token.
	mustRun(t, ns, "rollback", lineName, "--to", "late-risk-v1", "--token", "forward")
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhasePromoting)
	rollOutTo(t, ns, "late-risk-v1")
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseLive)
	out = mustRun(t, ns, "rollback", lineName, "--to", initial, "--token", "again")
	mustContain(t, "second rollback output", out, "asked late-risk to serve "+initial+" again")
	waitPhase(t, ns, initial, v1alpha1.PhasePromoting)
	rollOutTo(t, ns, initial)
	waitPhase(t, ns, initial, v1alpha1.PhaseLive)

	if _, err := kubectlPlumbline(t, ns, "status", "no-such-line"); err == nil || !strings.Contains(err.Error(), "not found") {
		t.Errorf("status of a missing line: %v", err)
	}
}

// lockedBuffer is a bytes.Buffer written by one goroutine and read by
// another.
type lockedBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (l *lockedBuffer) Write(p []byte) (int, error) {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.Write(p)
}

func (l *lockedBuffer) String() string {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.String()
}
