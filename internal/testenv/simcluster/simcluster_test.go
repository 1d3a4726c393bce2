package simcluster

import (
	"context"
	"errors"
	"os"
	"path/filepath"
	"testing"
	"time"

	appsv1 "k8s.io/api/apps/v1"
	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/util/wait"
	"k8s.io/client-go/kubernetes"
	"k8s.io/utils/ptr"
)

// start starts a simulated cluster for a test, or skips when its binaries
// are not built and the run does not require them (make test does).
func start(t *testing.T) *Cluster {
	t.Helper()
	if testing.Short() {
		t.Skip("needs the simulated cluster")
	}
	root, err := filepath.Abs("../../..")
	if err != nil {
		t.Fatal(err)
	}
	c, err := Start(context.Background(), Options{AssetsDir: AssetsDir(root), CRDDir: filepath.Join(root, "config", "crd", "bases"), WorkDir: t.TempDir()})
	if errors.Is(err, ErrNoBinaries) && os.Getenv("PLUMBLINE_REQUIRE_SIMCLUSTER") == "" {
		t.Skipf("%v", err)
	}
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		if err := c.Stop(); err != nil {
			t.Error(err)
		}
	})
	return c
}

func poll(t *testing.T, what string, f func(ctx context.Context) (bool, error)) {
	t.Helper()
	if err := wait.PollUntilContextTimeout(context.Background(), 200*time.Millisecond, 60*time.Second, true, f); err != nil {
		t.Fatalf("waiting for %s: %v", what, err)
	}
}

// The real Job controller retries a pod that the executor reports failed,
// and completes the Job when the next one succeeds; the termination message
// reaches the container's terminated state. The real Deployment controller
// rolls out a changed template on kwok's nodes.
func TestJobsAndRollouts(t *testing.T) {
	c := start(t)
	ctx := context.Background()
	cs := kubernetes.NewForConfigOrDie(c.Config)

	job := &batchv1.Job{
		ObjectMeta: metav1.ObjectMeta{Name: "sim", Namespace: "default"},
		Spec: batchv1.JobSpec{BackoffLimit: ptr.To[int32](2), Template: corev1.PodTemplateSpec{Spec: corev1.PodSpec{
			RestartPolicy: corev1.RestartPolicyNever,
			Containers:    []corev1.Container{{Name: "main", Image: "example.invalid/none"}},
		}}},
	}
	if _, err := cs.BatchV1().Jobs("default").Create(ctx, job, metav1.CreateOptions{}); err != nil {
		t.Fatal(err)
	}
	finish := func(code, msg string) string {
		var name string
		poll(t, "a running pod of the Job", func(ctx context.Context) (bool, error) {
			pods, err := cs.CoreV1().Pods("default").List(ctx, metav1.ListOptions{LabelSelector: "batch.kubernetes.io/job-name=sim"})
			if err != nil {
				return false, err
			}
			for _, p := range pods.Items {
				if p.Status.Phase == corev1.PodRunning && p.Annotations[ExitCodeAnnotation] == "" {
					name = p.Name
					return true, nil
				}
			}
			return false, nil
		})
		patch := []byte(`{"metadata":{"annotations":{"` + ExitCodeAnnotation + `":"` + code + `","` + MessageAnnotation + `":"` + msg + `"}}}`)
		if _, err := cs.CoreV1().Pods("default").Patch(ctx, name, "application/merge-patch+json", patch, metav1.PatchOptions{}); err != nil {
			t.Fatal(err)
		}
		return name
	}
	failed := finish("1", "first try fails")
	poll(t, "the failed pod", func(ctx context.Context) (bool, error) {
		p, err := cs.CoreV1().Pods("default").Get(ctx, failed, metav1.GetOptions{})
		return err == nil && p.Status.Phase == corev1.PodFailed, nil
	})
	ok := finish("0", `{\"schema\":\"x\"}`)
	poll(t, "the Job to complete", func(ctx context.Context) (bool, error) {
		j, err := cs.BatchV1().Jobs("default").Get(ctx, "sim", metav1.GetOptions{})
		if err != nil {
			return false, err
		}
		for _, cond := range j.Status.Conditions {
			if cond.Type == batchv1.JobComplete && cond.Status == corev1.ConditionTrue {
				return true, nil
			}
		}
		return false, nil
	})
	p, err := cs.CoreV1().Pods("default").Get(ctx, ok, metav1.GetOptions{})
	if err != nil {
		t.Fatal(err)
	}
	term := p.Status.ContainerStatuses[0].State.Terminated
	if term == nil || term.ExitCode != 0 || term.Message != `{"schema":"x"}` {
		t.Fatalf("terminated state %+v, want exit 0 and the message", term)
	}
	j, _ := cs.BatchV1().Jobs("default").Get(ctx, "sim", metav1.GetOptions{})
	if j.Status.Failed != 1 || j.Status.Succeeded != 1 {
		t.Fatalf("Job counts failed=%d succeeded=%d, want 1 and 1", j.Status.Failed, j.Status.Succeeded)
	}

	labels := map[string]string{"app": "web"}
	dep := &appsv1.Deployment{
		ObjectMeta: metav1.ObjectMeta{Name: "web", Namespace: "default"},
		Spec: appsv1.DeploymentSpec{Replicas: ptr.To[int32](2), Selector: &metav1.LabelSelector{MatchLabels: labels},
			Template: corev1.PodTemplateSpec{ObjectMeta: metav1.ObjectMeta{Labels: labels}, Spec: corev1.PodSpec{
				Containers: []corev1.Container{{Name: "web", Image: "example.invalid/web", Env: []corev1.EnvVar{{Name: "V", Value: "1"}}}},
			}}},
	}
	if _, err := cs.AppsV1().Deployments("default").Create(ctx, dep, metav1.CreateOptions{}); err != nil {
		t.Fatal(err)
	}
	rolledOut := func(gen int64) func(ctx context.Context) (bool, error) {
		return func(ctx context.Context) (bool, error) {
			d, err := cs.AppsV1().Deployments("default").Get(ctx, "web", metav1.GetOptions{})
			if err != nil {
				return false, err
			}
			st := d.Status
			return st.ObservedGeneration >= gen && st.UpdatedReplicas == 2 && st.AvailableReplicas == 2 && st.Replicas == 2, nil
		}
	}
	poll(t, "the Deployment to be available", rolledOut(1))
	patch := []byte(`{"spec":{"template":{"spec":{"containers":[{"name":"web","env":[{"name":"V","value":"2"}]}]}}}}`)
	if _, err := cs.AppsV1().Deployments("default").Patch(ctx, "web", "application/strategic-merge-patch+json", patch, metav1.PatchOptions{}); err != nil {
		t.Fatal(err)
	}
	poll(t, "the changed template to roll out", rolledOut(2))
	rs, err := cs.AppsV1().ReplicaSets("default").List(ctx, metav1.ListOptions{LabelSelector: "app=web"})
	if err != nil {
		t.Fatal(err)
	}
	if len(rs.Items) != 2 {
		t.Fatalf("%d ReplicaSets, want 2 (the old and the new)", len(rs.Items))
	}
}
