// Package standin plays the part of the kubelet and of the Job and
// Deployment controllers on a control plane that runs none of them (the
// API-server test tier and the embedded demo). It creates a finished Job's
// Pod with its containers' terminated states (the last container's
// termination message carries a report), marks the Job Complete or Failed the
// way the Job controller does, and sets a Deployment's rollout status the way
// the Deployment controller does. The controller under test or on show sees
// only what it would see in a cluster.
package standin

import (
	"context"
	"fmt"
	"time"

	appsv1 "k8s.io/api/apps/v1"
	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/types"
	"k8s.io/apimachinery/pkg/util/wait"
	"k8s.io/utils/ptr"
	"sigs.k8s.io/controller-runtime/pkg/client"
)

// SucceedJob finishes a Job successfully; its Pod's last container leaves
// message as its termination message.
func SucceedJob(ctx context.Context, c client.Client, ns, name, message string) error {
	job, err := finishPod(ctx, c, ns, name, "ok", 0, message)
	if err != nil {
		return err
	}
	now := metav1.Now()
	job.Status.StartTime = &now
	job.Status.CompletionTime = &now
	job.Status.Succeeded = 1
	job.Status.Conditions = append(job.Status.Conditions,
		batchv1.JobCondition{Type: batchv1.JobSuccessCriteriaMet, Status: corev1.ConditionTrue, Reason: "CompletionsReached", LastTransitionTime: now, LastProbeTime: now},
		batchv1.JobCondition{Type: batchv1.JobComplete, Status: corev1.ConditionTrue, Reason: "CompletionsReached", LastTransitionTime: now, LastProbeTime: now})
	if err := c.Status().Update(ctx, job); err != nil {
		return fmt.Errorf("mark Job %s complete: %w", name, err)
	}
	return nil
}

// FailJob fails a Job the way the Job controller does when it gives up
// (reason BackoffLimitExceeded or DeadlineExceeded, say); its Pod's last
// container leaves podMessage.
func FailJob(ctx context.Context, c client.Client, ns, name, reason, message, podMessage string) error {
	job, err := finishPod(ctx, c, ns, name, "failed", 1, podMessage)
	if err != nil {
		return err
	}
	now := metav1.Now()
	job.Status.StartTime = &now
	job.Status.Failed = 1
	job.Status.Conditions = append(job.Status.Conditions,
		batchv1.JobCondition{Type: batchv1.JobFailureTarget, Status: corev1.ConditionTrue, Reason: reason, Message: message, LastTransitionTime: now, LastProbeTime: now},
		batchv1.JobCondition{Type: batchv1.JobFailed, Status: corev1.ConditionTrue, Reason: reason, Message: message, LastTransitionTime: now, LastProbeTime: now})
	if err := c.Status().Update(ctx, job); err != nil {
		return fmt.Errorf("mark Job %s failed: %w", name, err)
	}
	return nil
}

// finishPod creates the Pod a Job would have run, finished with the exit
// code, and returns the Job.
func finishPod(ctx context.Context, c client.Client, ns, name, suffix string, exitCode int32, message string) (*batchv1.Job, error) {
	var job batchv1.Job
	if err := c.Get(ctx, types.NamespacedName{Namespace: ns, Name: name}, &job); err != nil {
		return nil, fmt.Errorf("get Job %s: %w", name, err)
	}
	spec := job.Spec.Template.Spec.DeepCopy()
	labels := map[string]string{}
	for k, v := range job.Spec.Template.Labels {
		labels[k] = v
	}
	labels[batchv1.ControllerUidLabel] = string(job.UID)
	labels[batchv1.JobNameLabel] = job.Name
	pod := &corev1.Pod{
		ObjectMeta: metav1.ObjectMeta{
			Namespace: ns, Name: job.Name + "-" + suffix, Labels: labels,
			OwnerReferences: []metav1.OwnerReference{*metav1.NewControllerRef(&job, batchv1.SchemeGroupVersion.WithKind("Job"))},
		},
		Spec: *spec,
	}
	if err := c.Create(ctx, pod); err != nil {
		return nil, fmt.Errorf("create Pod of Job %s: %w", name, err)
	}
	phase := corev1.PodSucceeded
	if exitCode != 0 {
		phase = corev1.PodFailed
	}
	now := metav1.Now()
	pod.Status.Phase = phase
	for i, ct := range spec.Containers {
		term := &corev1.ContainerStateTerminated{Reason: "Completed", StartedAt: now, FinishedAt: now}
		if i == len(spec.Containers)-1 {
			term.ExitCode, term.Message = exitCode, message
			if exitCode != 0 {
				term.Reason = "Error"
			}
		}
		pod.Status.ContainerStatuses = append(pod.Status.ContainerStatuses, corev1.ContainerStatus{
			Name: ct.Name, Image: ct.Image, ImageID: "docker-pullable://" + ct.Image, ContainerID: "containerd://" + ct.Name,
			State: corev1.ContainerState{Terminated: term},
		})
	}
	if err := c.Status().Update(ctx, pod); err != nil {
		return nil, fmt.Errorf("set Pod %s terminated: %w", pod.Name, err)
	}
	return &job, nil
}

// RollOut finishes a Deployment's rollout of its current generation.
func RollOut(ctx context.Context, c client.Client, ns, name string) error {
	return setRollout(ctx, c, ns, name, func(dep *appsv1.Deployment) {
		n := ptr.Deref(dep.Spec.Replicas, 1)
		dep.Status.Replicas, dep.Status.UpdatedReplicas, dep.Status.ReadyReplicas, dep.Status.AvailableReplicas = n, n, n, n
		now := metav1.Now()
		dep.Status.Conditions = []appsv1.DeploymentCondition{
			{Type: appsv1.DeploymentAvailable, Status: corev1.ConditionTrue, Reason: "MinimumReplicasAvailable", LastUpdateTime: now, LastTransitionTime: now},
			{Type: appsv1.DeploymentProgressing, Status: corev1.ConditionTrue, Reason: "NewReplicaSetAvailable", LastUpdateTime: now, LastTransitionTime: now},
		}
	})
}

// FailRollout marks a Deployment's rollout of its current generation as past
// its progress deadline, with one new replica that never became available.
func FailRollout(ctx context.Context, c client.Client, ns, name string) error {
	return setRollout(ctx, c, ns, name, func(dep *appsv1.Deployment) {
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

func setRollout(ctx context.Context, c client.Client, ns, name string, set func(*appsv1.Deployment)) error {
	var last error
	for attempt := 0; attempt < 5; attempt++ {
		var dep appsv1.Deployment
		if err := c.Get(ctx, types.NamespacedName{Namespace: ns, Name: name}, &dep); err != nil {
			return fmt.Errorf("get Deployment %s: %w", name, err)
		}
		dep.Status.ObservedGeneration = dep.Generation
		set(&dep)
		if last = c.Status().Update(ctx, &dep); last == nil {
			return nil
		}
	}
	return fmt.Errorf("set rollout status of Deployment %s: %w", name, last)
}

// RollOutVersion waits until the Deployment's pod template names a version
// (the controller has patched it), then finishes that rollout, as the
// Deployment controller would once it saw the new template.
func RollOutVersion(ctx context.Context, c client.Client, ns, name, version string, timeout time.Duration) error {
	err := wait.PollUntilContextTimeout(ctx, 50*time.Millisecond, timeout, true, func(ctx context.Context) (bool, error) {
		var dep appsv1.Deployment
		if err := c.Get(ctx, types.NamespacedName{Namespace: ns, Name: name}, &dep); err != nil {
			return false, err
		}
		return dep.Spec.Template.Annotations["plumbline.dev/version"] == version, nil
	})
	if err != nil {
		return fmt.Errorf("wait for Deployment %s to be patched to %s: %w", name, version, err)
	}
	return RollOut(ctx, c, ns, name)
}

// RunLastContainer plays the kubelet for a Job whose last container the
// caller can run in this process (the plumbline binary): it hands run that
// container's arguments and environment (as the controller set them), then
// finishes the Job the way the Job controller would: Complete with run's
// output as the termination message, or Failed (BackoffLimitExceeded) with
// run's error as the message.
func RunLastContainer(ctx context.Context, c client.Client, ns, name string, run func(args []string, env map[string]string) (string, error)) error {
	var job batchv1.Job
	if err := c.Get(ctx, types.NamespacedName{Namespace: ns, Name: name}, &job); err != nil {
		return fmt.Errorf("get Job %s: %w", name, err)
	}
	cs := job.Spec.Template.Spec.Containers
	if len(cs) == 0 {
		return fmt.Errorf("Job %s has no container", name)
	}
	last := cs[len(cs)-1]
	env := map[string]string{}
	for _, e := range last.Env {
		env[e.Name] = e.Value
	}
	msg, err := run(append([]string(nil), last.Args...), env)
	if err != nil {
		return FailJob(ctx, c, ns, name, "BackoffLimitExceeded", "Job has reached the specified backoff limit", err.Error())
	}
	return SucceedJob(ctx, c, ns, name, msg)
}
