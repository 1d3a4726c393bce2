package node

import (
	"bytes"
	"context"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strings"
	"testing"
	"time"

	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/util/wait"
	"k8s.io/client-go/kubernetes"
	"k8s.io/utils/ptr"

	"plumbline.dev/plumbline/internal/image"
)

// testImage is the plumbline image the node's pods run.
const testImage = "plumbline.local/plumbline:node-test"

// The real node runs Jobs of the plumbline image in real containers: one
// that succeeds, and one whose failure the kubelet reports in the
// container's termination message (from its log, as the Job asks). The
// figures (the node's start, a Job pod from creation to completion) are
// printed. Needs root, Debian's containerd, runc and CNI plugins, and the
// kubelet built into bin/k8s (make node); make test requires it where it
// can run (PLUMBLINE_REQUIRE_NODE=1), elsewhere it is skipped with the
// reason.
func TestNodeRunsJobs(t *testing.T) {
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
	archive := buildImage(t, root, dir)

	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Minute)
	defer cancel()
	n, err := Start(ctx, Options{AssetsDir: assets, CRDDir: filepath.Join(root, "config", "crd", "bases"), WorkDir: filepath.Join(dir, "node"), Images: []string{archive}})
	if err != nil {
		logs(t, filepath.Join(dir, "node"))
		t.Fatal(err)
	}
	t.Cleanup(func() {
		n.Stop()
		if out, _ := exec.Command("ip", "link", "show", Bridge).CombinedOutput(); !strings.Contains(string(out), "does not exist") {
			t.Errorf("the bridge %s is still there after Stop: %s", Bridge, out)
		}
	})
	for _, k := range []string{"control plane", "containerd and images", "kubelet to node Ready", "whole start"} {
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
func buildImage(t *testing.T, root, dir string) string {
	t.Helper()
	bin := filepath.Join(dir, "plumbline")
	build := exec.Command("go", "build", "-ldflags", "-X main.version=node-test", "-o", bin, ".")
	build.Dir = root
	build.Env = append(os.Environ(), "CGO_ENABLED=0")
	if out, err := build.CombinedOutput(); err != nil {
		t.Fatalf("build the static binary: %v\n%s", err, out)
	}
	img, err := image.Build(image.Spec{Binary: bin, CACerts: "/etc/ssl/certs/ca-certificates.crt", Arch: runtime.GOARCH, Version: "node-test"})
	if err != nil {
		t.Fatal(err)
	}
	var b bytes.Buffer
	if err := image.WriteArchive(&b, testImage, img); err != nil {
		t.Fatal(err)
	}
	archive := filepath.Join(dir, "plumbline.tar")
	if err := os.WriteFile(archive, b.Bytes(), 0o644); err != nil {
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
