package integration

import (
	"context"
	"fmt"
	"testing"
	"time"

	appsv1 "k8s.io/api/apps/v1"
	batchv1 "k8s.io/api/batch/v1"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/internal/testenv/standin"
)

// The test API server runs no kubelet, no Job controller and no Deployment
// controller. The helpers in this file play their part through
// internal/standin, as a cluster would: they create a finished Job's Pod with
// its containers' terminated states (the last container's termination
// message is the evaluation report), mark the Job Complete or Failed the way
// the Job controller does, and set a Deployment's rollout status the way the
// Deployment controller does. The controller under test sees only what it
// would see in a cluster.

// waitJob waits for a Job to exist and returns it.
func waitJob(t *testing.T, ns, name string) *batchv1.Job {
	t.Helper()
	var job batchv1.Job
	eventually(t, waitFor, func() error {
		return k8s.Get(context.Background(), client.ObjectKey{Namespace: ns, Name: name}, &job)
	})
	return &job
}

// succeedJob finishes a Job successfully, its Pod leaving message.
func succeedJob(t *testing.T, ns, name, message string) {
	t.Helper()
	waitJob(t, ns, name)
	if err := standin.SucceedJob(context.Background(), k8s, ns, name, message); err != nil {
		t.Fatal(err)
	}
}

// failJob fails a Job the way the Job controller does when it gives up, its
// Pod leaving message.
func failJob(t *testing.T, ns, name, reason, message, podMessage string) {
	t.Helper()
	waitJob(t, ns, name)
	if err := standin.FailJob(context.Background(), k8s, ns, name, reason, message, podMessage); err != nil {
		t.Fatal(err)
	}
}

// rollOut finishes a Deployment's rollout of its current generation.
func rollOut(t *testing.T, ns, name string) {
	t.Helper()
	if err := standin.RollOut(context.Background(), k8s, ns, name); err != nil {
		t.Fatal(err)
	}
}

// rollOutTo waits for the controller to patch the Deployment to a version,
// then finishes that rollout.
func rollOutTo(t *testing.T, ns, version string) {
	t.Helper()
	if err := standin.RollOutVersion(context.Background(), k8s, ns, scorer, version, waitFor); err != nil {
		t.Fatal(err)
	}
}

// failRollout marks a Deployment's rollout as past its progress deadline.
func failRollout(t *testing.T, ns, name string) {
	t.Helper()
	if err := standin.FailRollout(context.Background(), k8s, ns, name); err != nil {
		t.Fatal(err)
	}
}

// deploymentGeneration waits until the Deployment's generation is at least
// min and returns it.
func deploymentGeneration(t *testing.T, ns, name string, min int64) int64 {
	t.Helper()
	var dep appsv1.Deployment
	eventually(t, waitFor, func() error {
		if err := k8s.Get(context.Background(), client.ObjectKey{Namespace: ns, Name: name}, &dep); err != nil {
			return err
		}
		if dep.Generation < min {
			return fmt.Errorf("Deployment %s at generation %d, want %d", name, dep.Generation, min)
		}
		return nil
	})
	return dep.Generation
}

// settle gives the controller a moment to act on something that should
// change nothing, for checks that nothing changed.
func settle() { time.Sleep(1500 * time.Millisecond) }
