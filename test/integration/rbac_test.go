package integration

import (
	"context"
	"fmt"
	"slices"
	"testing"
	"time"

	authorizationv1 "k8s.io/api/authorization/v1"
	rbacv1 "k8s.io/api/rbac/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// managerRole is the ClusterRole of config/rbac the manager runs under.
const managerRole = "plumbline-manager"

// setJobCreate grants or takes away the manager's permission to create Jobs,
// in its real ClusterRole, and waits until the API server's authorizer says
// so.
func setJobCreate(t *testing.T, ns string, allowed bool) {
	t.Helper()
	ctx := context.Background()
	eventually(t, waitFor, func() error {
		var role rbacv1.ClusterRole
		if err := k8s.Get(ctx, client.ObjectKey{Name: managerRole}, &role); err != nil {
			return err
		}
		found := false
		for i, r := range role.Rules {
			if !slices.Contains(r.APIGroups, "batch") || !slices.Contains(r.Resources, "jobs") {
				continue
			}
			found = true
			verbs := slices.DeleteFunc(slices.Clone(r.Verbs), func(v string) bool { return v == "create" })
			if allowed {
				verbs = append(verbs, "create")
			}
			role.Rules[i].Verbs = verbs
		}
		if !found {
			t.Fatalf("ClusterRole %s has no rule for batch/jobs", managerRole)
		}
		return k8s.Update(ctx, &role)
	})
	eventually(t, waitFor, func() error {
		review := &authorizationv1.SubjectAccessReview{Spec: authorizationv1.SubjectAccessReviewSpec{User: managerUser,
			Groups:             []string{"system:serviceaccounts", "system:serviceaccounts:plumbline-system", "system:authenticated"},
			ResourceAttributes: &authorizationv1.ResourceAttributes{Namespace: ns, Verb: "create", Group: "batch", Resource: "jobs"}}}
		if err := k8s.Create(ctx, review); err != nil {
			return err
		}
		if review.Status.Allowed != allowed {
			return fmt.Errorf("the authorizer still says allowed=%v", review.Status.Allowed)
		}
		return nil
	})
}

// The manager runs under the ServiceAccount and ClusterRole of config/rbac.
// With the permission to create Jobs taken away, a retrain cannot start:
// the line says what is missing in its Ready condition and a Warning event,
// the manager keeps running and tries the line again calmly (no retry
// loop), and once the permission is back the retrain goes on.
func TestMissingPermissionIsReported(t *testing.T) {
	ns := "rbac-denied"
	key := liveLine(t, ns, nil)
	setJobCreate(t, ns, false)
	restored := false
	defer func() {
		if !restored {
			setJobCreate(t, ns, true)
		}
	}()

	requestRetrain(t, key, "needs-a-job")
	line := waitLineCondition(t, key, v1alpha1.ConditionReady, metav1.ConditionFalse, v1alpha1.ReasonPermissionDenied)
	mustContain(t, "Ready message", conditionMessage(line, v1alpha1.ConditionReady), `cannot create resource "jobs"`, `in the namespace "`+ns+`"`, "config/rbac")
	ev := waitEvent(t, ns, lineName, v1alpha1.ReasonPermissionDenied)
	if ev.Type != "Warning" {
		t.Errorf("PermissionDenied event of type %s", ev.Type)
	}
	if v := getVersion(t, ns, "late-risk-v1"); v.Status.Phase != v1alpha1.PhasePending && v.Status.Phase != "" {
		t.Errorf("late-risk-v1 is %s without its training Job", v.Status.Phase)
	}

	// No retry loop, and the manager is still up.
	labels := map[string]string{"namespace": ns, "line": lineName}
	before := metricValue(t, "plumbline_line_reconciles_total", labels)
	time.Sleep(3 * time.Second)
	if n := metricValue(t, "plumbline_line_reconciles_total", labels) - before; n > 5 {
		t.Errorf("%v passes over the line in 3 s while the permission is missing: a retry loop", n)
	}
	select {
	case err := <-running.done:
		running.cancel = nil
		t.Fatalf("the manager stopped: %v", err)
	default:
	}

	setJobCreate(t, ns, true)
	restored = true
	nudge(t, key, clk.Now())
	waitPhase(t, ns, "late-risk-v1", v1alpha1.PhaseTraining)
	waitLineCondition(t, key, v1alpha1.ConditionActionRequired, metav1.ConditionFalse, v1alpha1.ReasonNothingRequired)
	if n := countJobs(t, ns); n["train"] != 1 {
		t.Errorf("training Jobs %v, want one", n)
	}
}
