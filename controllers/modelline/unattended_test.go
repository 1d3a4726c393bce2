package modelline

import (
	"strings"
	"testing"

	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/utils/ptr"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/client/interceptor"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// Under Manual approval the first Imported version of a line with nothing
// live waits for a person, unless the line lets it go unattended; then it
// goes live without a gate, as under Automatic.
func TestFirstImportUnderManual(t *testing.T) {
	for _, c := range []struct {
		name      string
		approval  v1alpha1.ApprovalMode
		unattend  *bool
		wantPhase v1alpha1.VersionPhase
	}{
		{"Automatic", v1alpha1.ApprovalAutomatic, nil, v1alpha1.PhasePromoting},
		{"Manual", v1alpha1.ApprovalManual, nil, v1alpha1.PhaseAwaitingApproval},
		{"Manual, firstImport allowed", v1alpha1.ApprovalManual, ptr.To(true), v1alpha1.PhasePromoting},
		{"Automatic, firstImport left to a person", v1alpha1.ApprovalAutomatic, ptr.To(false), v1alpha1.PhaseAwaitingApproval},
	} {
		t.Run(c.name, func(t *testing.T) {
			line := passLine()
			line.Spec.Gate.Approval = c.approval
			if c.unattend != nil {
				line.Spec.Gate.WithoutApproval = &v1alpha1.UnattendedSwitches{FirstImport: c.unattend}
			}
			v0 := modelVersion("late-risk-v0", 0, "", v1alpha1.SourceImported)
			w := newWorld(t, interceptor.Funcs{}, line, v0, scorerDeployment("", "s3://larkspur/rules"))
			w.mustPass()
			got := w.version("late-risk-v0")
			if got.Status.Phase != c.wantPhase {
				t.Fatalf("first import is %s (%s), want %s", got.Status.Phase, got.Status.Message, c.wantPhase)
			}
			if c.wantPhase != v1alpha1.PhaseAwaitingApproval {
				return
			}
			if !strings.Contains(got.Status.Message, "kubectl plumbline approve late-risk-v0") {
				t.Errorf("message %q does not say how to approve", got.Status.Message)
			}
			w.mustPass()
			if d := w.deployment(); d.Spec.Template.Annotations[v1alpha1.VersionAnnotation] != "" {
				t.Fatalf("the Deployment serves %q before a person approved", d.Spec.Template.Annotations[v1alpha1.VersionAnnotation])
			}
			l := w.line()
			if a := meta.FindStatusCondition(l.Status.Conditions, v1alpha1.ConditionActionRequired); a == nil || a.Status != metav1.ConditionTrue || a.Reason != v1alpha1.ConditionAwaitingApproval {
				t.Errorf("ActionRequired %+v while the first version waits", a)
			}
			orig := got.DeepCopy()
			got.Spec.Decision = v1alpha1.DecisionApproved
			if err := w.c.Patch(t.Context(), got, client.MergeFrom(orig)); err != nil {
				t.Fatal(err)
			}
			w.mustPass()
			if v := w.version("late-risk-v0"); v.Status.Phase != v1alpha1.PhasePromoting {
				t.Errorf("approved first import is %s, want Promoting", v.Status.Phase)
			}
		})
	}
}
