package node

import (
	"context"
	"maps"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/util/wait"
	"k8s.io/client-go/kubernetes"
	"k8s.io/utils/ptr"
)

// testImage is the plumbline image the node's pods run.
const testImage = "plumbline.local/plumbline:node-test"

// The real node runs Jobs of the plumbline image in real containers: one
// that succeeds, and one whose failure the kubelet reports in the
// container's termination message (from its log, as the Job asks); then
// the manager, deployed from config/default as a user would, runs in a pod
// under its own ServiceAccount and RBAC and acts on a line. The figures
// (the node's start, a Job pod from creation to completion, the manager's
// pod) are printed. Needs root, Debian's containerd, runc and CNI plugins, and the
// kubelet built into bin/k8s (make node); make test requires it where it
// can run (PLUMBLINE_REQUIRE_NODE=1), elsewhere it is skipped with the
// reason.
func TestRealNode(t *testing.T) {
	if testing.Short() {
		t.Skip("starts a real node")
	}
	root := moduleRoot()
	assets := os.Getenv("KUBEBUILDER_ASSETS")
	if assets == "" {
		assets = filepath.Join(root, "bin", "k8s")
	}
	if err := Available(assets); err != nil {
		if os.Getenv("PLUMBLINE_REQUIRE_NODE") != "" {
			t.Fatalf("PLUMBLINE_REQUIRE_NODE is set: %v", err)
		}
		t.Skip(err)
	}
	// A short work directory: containerd's socket lies in it.
	dir, err := os.MkdirTemp("", "pln-")
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = os.RemoveAll(dir) })
	archive := buildImage(t, dir)

	// Long enough to wait for another package's node (the end-to-end
	// suite's) to stop first.
	ctx, cancel := context.WithTimeout(context.Background(), 15*time.Minute)
	defer cancel()
	before := readSysctls()
	n, err := Start(ctx, Options{AssetsDir: assets, CRDDir: filepath.Join(root, "config", "crd", "bases"), WorkDir: filepath.Join(dir, "node"), Images: []string{archive}})
	if err != nil {
		logs(t, filepath.Join(dir, "node"))
		t.Fatal(err)
	}
	t.Cleanup(func() {
		n.Stop()
		if after := readSysctls(); !maps.Equal(before, after) {
			t.Errorf("kernel settings changed by the node and not put back:\nbefore %v\nafter  %v", before, after)
		}
		if out, _ := exec.Command("ip", "link", "show", Bridge).CombinedOutput(); !strings.Contains(string(out), "does not exist") {
			t.Errorf("the bridge %s is still there after Stop: %s", Bridge, out)
		}
		if out, _ := exec.Command("iptables", "-t", "nat", "-S", "PREROUTING").CombinedOutput(); strings.Contains(string(out), serviceIP) || strings.Contains(string(out), "KUBE-SERVICES") {
			t.Errorf("nat rules are still there after Stop:\n%s", out)
		}
	})
	for _, k := range []string{"control plane", "containerd and images", "kubelet to node Ready", "kube-proxy's rules", "whole start"} {
		t.Logf("node: %s %s", k, n.Timings[k].Round(100*time.Millisecond))
	}

	cs, err := kubernetes.NewForConfig(n.Config)
	if err != nil {
		t.Fatal(err)
	}
	ok := runJob(ctx, t, cs, "version", []string{"/plumbline", "version"})
	if ok.Status.Succeeded != 1 {
		logs(t, filepath.Join(dir, "node"))
		t.Fatalf("the Job of /plumbline version did not succeed: %+v", ok.Status)
	}
	bad := runJob(ctx, t, cs, "usage", []string{"/plumbline", "backtest", "--target", "0.8", "--schedule", "@daily"})
	if bad.Status.Failed == 0 {
		t.Fatalf("the Job of a usage error did not fail: %+v", bad.Status)
	}
	pods, err := cs.CoreV1().Pods("default").List(ctx, metav1.ListOptions{LabelSelector: "job-name=usage"})
	if err != nil || len(pods.Items) == 0 {
		t.Fatalf("the failed Job's pods: %v", err)
	}
	term := pods.Items[0].Status.ContainerStatuses[0].State.Terminated
	if term == nil || term.ExitCode != 2 || !strings.Contains(term.Message, "--history is required") {
		t.Errorf("the failed container's state: %+v", term)
	}
	// kubectl logs: the API server reaches the kubelet with its client
	// certificate.
	logs, err := cs.CoreV1().Pods("default").GetLogs(pods.Items[0].Name, &corev1.PodLogOptions{}).DoRaw(ctx)
	if err != nil || !strings.Contains(string(logs), "--history is required") {
		t.Errorf("the pod's log through the API server: %v %s", err, logs)
	}

	managerInAPod(ctx, t, n, cs, root)
}

// managerInAPod applies config/default as a user would (kubectl apply
// --server-side of its kustomization, the image set), and checks that the
// manager, a pod under its own ServiceAccount and the generated RBAC,
// reaches the API server through the kubernetes Service and acts on a line.
func managerInAPod(ctx context.Context, t *testing.T, n *Node, cs kubernetes.Interface, root string) {
	t.Helper()
	kubectl, err := exec.LookPath("kubectl")
	if err != nil {
		t.Skip("kubectl is not installed (make kubectl)")
	}
	rendered, err := exec.Command(kubectl, "kustomize", filepath.Join(root, "config", "default")).Output()
	if err != nil {
		t.Fatalf("kubectl kustomize config/default: %v", err)
	}
	// The image set as kustomize's images field would, pulled never: it is
	// in the node's containerd.
	var lines []string
	for _, l := range strings.Split(string(rendered), "\n") {
		if strings.TrimSpace(l) == "image: plumbline:dev" {
			indent := l[:len(l)-len(strings.TrimLeft(l, " "))]
			lines = append(lines, indent+"image: "+testImage, indent+"imagePullPolicy: Never")
			continue
		}
		lines = append(lines, l)
	}
	manifest := strings.Join(lines, "\n")
	apply := exec.Command(kubectl, "--kubeconfig", n.KubeconfigPath, "apply", "--server-side", "-f", "-")
	apply.Stdin = strings.NewReader(manifest)
	if out, err := apply.CombinedOutput(); err != nil {
		t.Fatalf("kubectl apply --server-side: %v\n%s", err, out)
	}
	start := time.Now()
	err = wait.PollUntilContextTimeout(ctx, time.Second, 50*time.Second, true, func(ctx context.Context) (bool, error) {
		d, err := cs.AppsV1().Deployments("plumbline-system").Get(ctx, "plumbline-manager", metav1.GetOptions{})
		return err == nil && d.Status.AvailableReplicas == 1, nil
	})
	if err != nil {
		pods, _ := cs.CoreV1().Pods("plumbline-system").List(ctx, metav1.ListOptions{})
		for _, p := range pods.Items {
			t.Logf("pod %s: %s %+v", p.Name, p.Status.Phase, p.Status.ContainerStatuses)
		}
		b, _ := os.ReadFile(filepath.Join(n.dir, "kube-proxy.log"))
		t.Logf("kube-proxy.log:\n%s", b)
		if out, err := exec.Command("iptables-save", "-t", "nat").CombinedOutput(); err == nil {
			t.Logf("iptables nat:\n%s", out)
		}
		// The container's own log, as the kubelet keeps it.
		files, _ := filepath.Glob("/var/log/pods/plumbline-system_*/manager/*.log")
		for _, f := range files {
			b, _ := os.ReadFile(f)
			t.Logf("%s:\n%s", f, b)
		}
		t.Fatalf("the manager's Deployment is not available: %v", err)
	}
	t.Logf("node: the manager pod available %s after apply", time.Since(start).Round(100*time.Millisecond))

	// It acts: a line whose serving Deployment is missing gets Ready=False
	// (ServingNotFound) from the manager in the pod.
	line := `apiVersion: v1
kind: Namespace
metadata:
  name: larkspur
---
apiVersion: plumbline.dev/v1alpha1
kind: ModelLine
metadata:
  name: late-risk
  namespace: larkspur
spec:
  serving: {deploymentName: late-risk-scorer, containerName: scorer}
  training:
    artifactURI: s3://larkspur-models/late-risk/{{.Number}}
    jobTemplate: {spec: {template: {spec: {restartPolicy: Never, containers: [{name: train, image: ` + testImage + `}]}}}}
  gate:
    jobTemplate: {spec: {template: {spec: {restartPolicy: Never, containers: [{name: gate, image: ` + testImage + `}]}}}}
    criteria: [{metric: roc_auc, minimum: 0.8}]
`
	apply = exec.Command(kubectl, "--kubeconfig", n.KubeconfigPath, "apply", "--server-side", "-f", "-")
	apply.Stdin = strings.NewReader(line)
	if out, err := apply.CombinedOutput(); err != nil {
		t.Fatalf("apply a line: %v\n%s", err, out)
	}
	err = wait.PollUntilContextTimeout(ctx, time.Second, time.Minute, true, func(ctx context.Context) (bool, error) {
		out, err := exec.Command(kubectl, "--kubeconfig", n.KubeconfigPath, "-n", "larkspur", "get", "mline", "late-risk",
			"-o", `jsonpath={.status.conditions[?(@.type=="Ready")].reason}`).Output()
		return err == nil && string(out) == "ServingNotFound", nil
	})
	if err != nil {
		t.Errorf("the manager in its pod did not judge the line: %v", err)
	}
}

// runJob runs a Job of the plumbline image to its end and prints how long
// its pod took.
func runJob(ctx context.Context, t *testing.T, cs kubernetes.Interface, name string, command []string) *batchv1.Job {
	t.Helper()
	job := &batchv1.Job{
		ObjectMeta: metav1.ObjectMeta{Name: name, Namespace: "default"},
		Spec: batchv1.JobSpec{
			BackoffLimit: ptr.To[int32](0),
			Template: corev1.PodTemplateSpec{Spec: corev1.PodSpec{
				RestartPolicy:                 corev1.RestartPolicyNever,
				AutomountServiceAccountToken:  ptr.To(false),
				TerminationGracePeriodSeconds: ptr.To[int64](1),
				Containers: []corev1.Container{{Name: "main", Image: testImage, ImagePullPolicy: corev1.PullNever, Command: command,
					TerminationMessagePolicy: corev1.TerminationMessageFallbackToLogsOnError}},
			}},
		},
	}
	start := time.Now()
	if _, err := cs.BatchV1().Jobs("default").Create(ctx, job, metav1.CreateOptions{}); err != nil {
		t.Fatal(err)
	}
	var got *batchv1.Job
	err := wait.PollUntilContextTimeout(ctx, 200*time.Millisecond, 2*time.Minute, true, func(ctx context.Context) (bool, error) {
		j, err := cs.BatchV1().Jobs("default").Get(ctx, name, metav1.GetOptions{})
		if err != nil {
			return false, nil
		}
		got = j
		for _, c := range j.Status.Conditions {
			if (c.Type == batchv1.JobComplete || c.Type == batchv1.JobFailed) && c.Status == corev1.ConditionTrue {
				return true, nil
			}
		}
		return false, nil
	})
	if err != nil {
		t.Fatalf("Job %s did not end: %v (%+v)", name, err, got)
	}
	t.Logf("node: Job %s ended in %s", name, time.Since(start).Round(100*time.Millisecond))
	return got
}

// buildImage writes the plumbline image archive of the current code.
func buildImage(t *testing.T, dir string) string {
	t.Helper()
	archive, err := PlumblineImage(context.Background(), dir, testImage, "node-test")
	if err != nil {
		t.Fatal(err)
	}
	return archive
}

// logs prints the tail of each component's log, for a start that failed.
func logs(t *testing.T, dir string) {
	t.Helper()
	files, _ := filepath.Glob(filepath.Join(dir, "*.log"))
	files2, _ := filepath.Glob(filepath.Join(dir, "ctr", "*.log"))
	for _, f := range append(files, files2...) {
		b, _ := os.ReadFile(f)
		lines := strings.Split(string(b), "\n")
		if len(lines) > 15 {
			lines = lines[len(lines)-15:]
		}
		t.Logf("%s:\n%s", f, strings.Join(lines, "\n"))
	}
}
