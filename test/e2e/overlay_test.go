package e2e

import (
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"strconv"
	"strings"
	"testing"

	appsv1 "k8s.io/api/apps/v1"
	corev1 "k8s.io/api/core/v1"
	"sigs.k8s.io/yaml"
)

// The overlay the suite installs renders with kubectl's kustomize: the
// manager gets the image and the Prometheus address, and a config/default
// whose flag moved would fail the patch's test instead of going unpatched.
func TestOverlayRenders(t *testing.T) {
	kubectl, err := exec.LookPath("kubectl")
	if err != nil {
		t.Skip("kubectl is not installed (make kubectl)")
	}
	root, err := filepath.Abs(filepath.Join("..", ".."))
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	rel, err := filepath.Rel(dir, filepath.Join(root, "config", "default"))
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(dir, "kustomization.yaml"), []byte(Overlay(rel, "registry.example/plumbline", "v1.2.3", "http://10.0.0.9:9090")), 0o644); err != nil {
		t.Fatal(err)
	}
	out, err := exec.Command(kubectl, "kustomize", dir).CombinedOutput()
	if err != nil {
		t.Fatalf("kubectl kustomize the overlay: %v\n%s", err, out)
	}
	for _, want := range []string{"image: registry.example/plumbline:v1.2.3", "--prometheus-url=http://10.0.0.9:9090"} {
		if !strings.Contains(string(out), want) {
			t.Errorf("the rendered overlay has no %q", want)
		}
	}
	if strings.Contains(string(out), "prometheus.monitoring.svc") {
		t.Error("the default Prometheus address is still in the rendered overlay")
	}
	memoryLimitFits(t, string(out))
}

// memoryLimitFits checks that the manager's GOMEMLIMIT is below its
// container's memory limit, with room for what the Go runtime keeps outside
// the heap (about a tenth), and not so far below that it wastes the limit.
func memoryLimitFits(t *testing.T, rendered string) {
	t.Helper()
	for _, doc := range strings.Split(rendered, "\n---\n") {
		var d appsv1.Deployment
		if err := yaml.Unmarshal([]byte(doc), &d); err != nil || d.Kind != "Deployment" || d.Name != "plumbline-manager" {
			continue
		}
		c := d.Spec.Template.Spec.Containers[0]
		limit, ok := c.Resources.Limits[corev1.ResourceMemory]
		var soft string
		for _, e := range c.Env {
			if e.Name == "GOMEMLIMIT" {
				soft = e.Value
			}
		}
		mib, err := strconv.Atoi(strings.TrimSuffix(soft, "MiB"))
		if !ok || err != nil || !strings.HasSuffix(soft, "MiB") {
			t.Fatalf("the manager has memory limit %v and GOMEMLIMIT %q; want both, GOMEMLIMIT in MiB", limit.String(), soft)
		}
		if share := float64(int64(mib)<<20) / float64(limit.Value()); share < 0.8 || share > 0.95 {
			t.Errorf("GOMEMLIMIT %s is %.0f%% of the memory limit %s; keep it about 90%%", soft, 100*share, limit.String())
		}
		return
	}
	t.Fatal("no plumbline-manager Deployment in the rendered overlay")
}

// The README's "Install in a cluster" is what the suite does: the same
// overlay, applied server-side with -k, and the same wait.
func TestReadmeInstallIsTheSuites(t *testing.T) {
	b, err := os.ReadFile(filepath.Join("..", "..", "README.md"))
	if err != nil {
		t.Fatal(err)
	}
	readme := string(b)
	start := strings.Index(readme, "## Install in a cluster")
	if start < 0 {
		t.Fatal(`the README has no "## Install in a cluster"`)
	}
	section := readme[start:]
	open := "kustomization.yaml <<'EOF'\n"
	i := strings.Index(section, open)
	if i < 0 {
		t.Fatal("the README's install section writes no kustomization.yaml")
	}
	body := section[i+len(open):]
	body = body[:strings.Index(body, "\nEOF\n")]
	var got, want map[string]any
	if err := yaml.Unmarshal([]byte(body), &got); err != nil {
		t.Fatalf("the README's kustomization: %v", err)
	}
	if err := yaml.Unmarshal([]byte(Overlay("../plumbline/config/default", "plumbline", "dev", "http://prometheus.monitoring.svc:9090")), &want); err != nil {
		t.Fatal(err)
	}
	delete(want, "apiVersion")
	delete(want, "kind")
	if !reflect.DeepEqual(got, want) {
		t.Errorf("the README's overlay differs from the suite's:\nREADME %v\nsuite  %v", got, want)
	}
	for _, cmd := range []string{"kubectl apply --server-side -k ../my-plumbline", "wait --for=condition=Available deployment/plumbline-manager",
		"kind load image-archive bin/plumbline-image.tar"} {
		if !strings.Contains(section, cmd) {
			t.Errorf("the README's install section lacks %q", cmd)
		}
	}
}
