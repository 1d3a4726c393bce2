package integration

import (
	"context"
	"os"
	"os/exec"
	"testing"

	"sigs.k8s.io/controller-runtime/pkg/client"
)

// `kubectl apply --server-side -k config/default` would install the CRDs, the
// RBAC and the manager: the rendered objects pass the API server's whole
// validation (a dry-run server-side apply, which refuses a field the schema
// does not declare instead of dropping it).
func TestDefaultKustomizationApplies(t *testing.T) {
	kubectl, err := exec.LookPath("kubectl")
	if err != nil {
		if os.Getenv("PLUMBLINE_REQUIRE_ENVTEST") != "" {
			t.Fatal("kubectl is needed to render config/default with kustomize")
		}
		t.Skip("kubectl not found; it renders config/default")
	}
	cmd := exec.Command(kubectl, "kustomize", "config/default")
	cmd.Dir = repoRoot
	out, err := cmd.Output()
	if err != nil {
		t.Fatalf("kubectl kustomize config/default: %v", err)
	}
	objs, err := decodeYAMLStream(out, "config/default")
	if err != nil {
		t.Fatal(err)
	}
	kinds := map[string]int{}
	for _, o := range objs {
		kinds[o.GetKind()]++
		err := k8s.Apply(context.Background(), client.ApplyConfigurationFromUnstructured(o),
			client.FieldOwner("plumbline-test"), client.ForceOwnership, client.DryRunAll)
		if err != nil {
			t.Errorf("%s %s: %v", o.GetKind(), o.GetName(), err)
		}
	}
	want := map[string]int{"CustomResourceDefinition": 2, "ClusterRole": 1, "ClusterRoleBinding": 1, "Role": 1, "RoleBinding": 1,
		"ServiceAccount": 1, "Deployment": 1, "Namespace": 1, "Service": 1}
	for k, n := range want {
		if kinds[k] != n {
			t.Errorf("config/default renders %d %s, want %d", kinds[k], k, n)
		}
	}
}
