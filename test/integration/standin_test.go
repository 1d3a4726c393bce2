package integration

import (
	"context"
	"fmt"
	"testing"
	"time"

	appsv1 "k8s.io/api/apps/v1"
	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/utils/ptr"
	"sigs.k8s.io/controller-runtime/pkg/client"
)

// The test API server runs no kubelet, no Job controller and no Deployment
// controller. The helpers in this file play their part, as a cluster would:
// they create a finished Job's Pod with its containers' terminated states
// (the last container's termination message is the evaluation report), mark
// the Job Complete or Failed the way the Job controller does, and set a
// Deployment's rollout status the way the Deployment controller does. The
// controller under test sees only what it would see in a cluster.

// waitJob waits for a Job to exist and returns it.
func waitJob(t *testing.T, ns, name string) *batchv1.Job {
	t.Helper()
	var job batchv1.Job
	eventually(t, waitFor, func() error {
		return k8s.Get(context.Background(), client.ObjectKey{Namespace: ns, Name: name}, &job)
	})
	return &job
}

// jobPod creates the Pod a Job would have run, finished with the given exit
// code, the last container leaving message as its termination message.
func jobPod(t *testing.T, job *batchv1.Job, suffix string, exitCode int32, message string) {
	t.Helper()
	ctx := context.Background()
	spec := job.Spec.Template.Spec.DeepCopy()
	labels := map[string]string{}
	for k, v := range job.Spec.Template.Labels {
		labels[k] = v
	}
	labels[batchv1.ControllerUidLabel] = string(job.UID)
	labels[batchv1.JobNameLabel] = job.Name
	pod := &corev1.Pod{
		ObjectMeta: metav1.ObjectMeta{
			Namespace: job.Namespace, Name: job.Name + "-" + suffix, Labels: labels,
			OwnerReferences: []metav1.OwnerReference{*metav1.NewControllerRef(job, batchv1.SchemeGroupVersion.WithKind("Job"))},
		},
		Spec: *spec,
	}
	if err := k8s.Create(ctx, pod); err != nil {
		t.Fatalf("create Pod of Job %s: %v", job.Name, err)
	}
	phase := corev1.PodSucceeded
	if exitCode != 0 {
		phase = corev1.PodFailed
	}
	now := metav1.Now()
	pod.Status.Phase = phase
	for i, c := range spec.Containers {
		term := &corev1.ContainerStateTerminated{ExitCode: 0, Reason: "Completed", StartedAt: now, FinishedAt: now}
		if i == len(spec.Containers)-1 {
			term.ExitCode, term.Message = exitCode, message
			if exitCode != 0 {
				term.Reason = "Error"
			}
		}
		pod.Status.ContainerStatuses = append(pod.Status.ContainerStatuses, corev1.ContainerStatus{
			Name: c.Name, Image: c.Image, ImageID: "docker-pullable://" + c.Image, ContainerID: "containerd://" + c.Name,
			State: corev1.ContainerState{Terminated: term},
		})
	}
	if err := k8s.Status().Update(ctx, pod); err != nil {
		t.Fatalf("set Pod %s terminated: %v", pod.Name, err)
	}
}

// succeedJob finishes a Job successfully, its Pod leaving message.
func succeedJob(t *testing.T, ns, name, message string) {
	t.Helper()
	job := waitJob(t, ns, name)
	jobPod(t, job, "ok", 0, message)
	now := metav1.Now()
	job.Status.StartTime = &now
	job.Status.CompletionTime = &now
	job.Status.Succeeded = 1
	job.Status.Conditions = append(job.Status.Conditions,
		batchv1.JobCondition{Type: batchv1.JobSuccessCriteriaMet, Status: corev1.ConditionTrue, Reason: "CompletionsReached", LastTransitionTime: now, LastProbeTime: now},
		batchv1.JobCondition{Type: batchv1.JobComplete, Status: corev1.ConditionTrue, Reason: "CompletionsReached", LastTransitionTime: now, LastProbeTime: now})
	if err := k8s.Status().Update(context.Background(), job); err != nil {
		t.Fatalf("mark Job %s complete: %v", name, err)
	}
}

// failJob fails a Job the way the Job controller does when it gives up, its
// Pod leaving message.
func failJob(t *testing.T, ns, name, reason, message, podMessage string) {
	t.Helper()
	job := waitJob(t, ns, name)
	jobPod(t, job, "failed", 1, podMessage)
	now := metav1.Now()
	job.Status.StartTime = &now
	job.Status.Failed = 1
	job.Status.Conditions = append(job.Status.Conditions,
		batchv1.JobCondition{Type: batchv1.JobFailureTarget, Status: corev1.ConditionTrue, Reason: reason, Message: message, LastTransitionTime: now, LastProbeTime: now},
		batchv1.JobCondition{Type: batchv1.JobFailed, Status: corev1.ConditionTrue, Reason: reason, Message: message, LastTransitionTime: now, LastProbeTime: now})
	if err := k8s.Status().Update(context.Background(), job); err != nil {
		t.Fatalf("mark Job %s failed: %v", name, err)
	}
}

// rollOut finishes a Deployment's rollout of its current generation.
func rollOut(t *testing.T, ns, name string) {
	t.Helper()
	setRollout(t, ns, name, func(dep *appsv1.Deployment) {
		n := ptr.Deref(dep.Spec.Replicas, 1)
		dep.Status.Replicas, dep.Status.UpdatedReplicas, dep.Status.ReadyReplicas, dep.Status.AvailableReplicas = n, n, n, n
		now := metav1.Now()
		dep.Status.Conditions = []appsv1.DeploymentCondition{
			{Type: appsv1.DeploymentAvailable, Status: corev1.ConditionTrue, Reason: "MinimumReplicasAvailable", LastUpdateTime: now, LastTransitionTime: now},
			{Type: appsv1.DeploymentProgressing, Status: corev1.ConditionTrue, Reason: "NewReplicaSetAvailable", LastUpdateTime: now, LastTransitionTime: now},
		}
	})
}

// failRollout marks a Deployment's rollout of its current generation as past
// its progress deadline, with one new replica that never became available.
func failRollout(t *testing.T, ns, name string) {
	t.Helper()
	setRollout(t, ns, name, func(dep *appsv1.Deployment) {
		n := ptr.Deref(dep.Spec.Replicas, 1)
		dep.Status.Replicas, dep.Status.UpdatedReplicas, dep.Status.ReadyReplicas, dep.Status.AvailableReplicas = n+1, 1, n, n
		now := metav1.Now()
		dep.Status.Conditions = []appsv1.DeploymentCondition{
			{Type: appsv1.DeploymentAvailable, Status: corev1.ConditionTrue, Reason: "MinimumReplicasAvailable", LastUpdateTime: now, LastTransitionTime: now},
			{Type: appsv1.DeploymentProgressing, Status: corev1.ConditionFalse, Reason: "ProgressDeadlineExceeded",
				Message: fmt.Sprintf("ReplicaSet %q has timed out progressing.", name+"-7d9f8c"), LastUpdateTime: now, LastTransitionTime: now},
		}
	})
}

func setRollout(t *testing.T, ns, name string, set func(*appsv1.Deployment)) {
	t.Helper()
	eventually(t, waitFor, func() error {
		var dep appsv1.Deployment
		if err := k8s.Get(context.Background(), client.ObjectKey{Namespace: ns, Name: name}, &dep); err != nil {
			return err
		}
		dep.Status.ObservedGeneration = dep.Generation
		set(&dep)
		return k8s.Status().Update(context.Background(), &dep)
	})
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
