package integration

import (
	"context"
	"fmt"
	"testing"
	"time"

	appsv1 "k8s.io/api/apps/v1"
	corev1 "k8s.io/api/core/v1"
	eventsv1 "k8s.io/api/events/v1"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/utils/ptr"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/api/v1alpha1"
)

const waitFor = 20 * time.Second

func expectCondition(conds []metav1.Condition, typ string, status metav1.ConditionStatus, reason string) error {
	c := meta.FindStatusCondition(conds, typ)
	if c == nil {
		return fmt.Errorf("no %s condition yet", typ)
	}
	if c.Status != status || c.Reason != reason {
		return fmt.Errorf("%s is %s/%s (%s), want %s/%s", typ, c.Status, c.Reason, c.Message, status, reason)
	}
	return nil
}

// waitLineCondition waits for the line's condition and returns the line.
func waitLineCondition(t *testing.T, key client.ObjectKey, typ string, status metav1.ConditionStatus, reason string) *v1alpha1.ModelLine {
	t.Helper()
	var line v1alpha1.ModelLine
	eventually(t, waitFor, func() error {
		if err := k8s.Get(context.Background(), key, &line); err != nil {
			return err
		}
		return expectCondition(line.Status.Conditions, typ, status, reason)
	})
	return &line
}

// eventsFor lists the events about an object with a reason.
func eventsFor(t *testing.T, namespace, name, reason string) []eventsv1.Event {
	t.Helper()
	var list eventsv1.EventList
	if err := k8s.List(context.Background(), &list, client.InNamespace(namespace)); err != nil {
		t.Fatal(err)
	}
	var out []eventsv1.Event
	for _, e := range list.Items {
		if e.Regarding.Name == name && e.Reason == reason {
			out = append(out, e)
		}
	}
	return out
}

func waitEvent(t *testing.T, namespace, name, reason string) eventsv1.Event {
	t.Helper()
	var found eventsv1.Event
	eventually(t, waitFor, func() error {
		evs := eventsFor(t, namespace, name, reason)
		if len(evs) == 0 {
			return fmt.Errorf("no %s event for %s/%s", reason, namespace, name)
		}
		found = evs[0]
		return nil
	})
	return found
}

func servingDeployment(namespace, name string, containers ...string) *appsv1.Deployment {
	var cs []corev1.Container
	for _, c := range containers {
		cs = append(cs, corev1.Container{Name: c, Image: "registry.larkspur.example/scorer:1"})
	}
	labels := map[string]string{"app": name}
	return &appsv1.Deployment{
		ObjectMeta: metav1.ObjectMeta{Namespace: namespace, Name: name},
		Spec: appsv1.DeploymentSpec{
			Replicas: ptr.To[int32](1),
			Selector: &metav1.LabelSelector{MatchLabels: labels},
			Template: corev1.PodTemplateSpec{ObjectMeta: metav1.ObjectMeta{Labels: labels}, Spec: corev1.PodSpec{Containers: cs}},
		},
	}
}

// A spec that CEL accepts but the controller finds wrong gets Ready=False
// with reason InvalidSpec, a message naming the field, one Warning event and
// no retries; fixing the spec moves on to the next thing missing (the
// Deployment), and the Deployment appearing makes the line Ready.
func TestInvalidSpecCondition(t *testing.T) {
	ctx := context.Background()
	createNamespace(t, "invalid-spec")
	start := clk.Now()

	o := sample(t, lineSample)
	o.SetNamespace("invalid-spec")
	mustSet(t, o, "spec.schedule.cron", "30 2 * * Mon-Funday")
	mustSet(t, o, "spec.triggers[1].query", "sum(rate(larkspur_deliveries_late_total[1h])")
	mustSet(t, o, "spec.fallback", nil)
	if err := k8s.Create(ctx, o); err != nil {
		t.Fatal(err)
	}
	key := client.ObjectKeyFromObject(o)
	line := waitLineCondition(t, key, v1alpha1.ConditionReady, metav1.ConditionFalse, v1alpha1.ReasonInvalidSpec)
	c := meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionReady)
	mustContain(t, "Ready message", c.Message, "spec.schedule.cron:", "5-field cron", "spec.triggers[1].query:", "PromQL does not parse")
	if !c.LastTransitionTime.Time.Equal(start.Truncate(time.Second)) {
		t.Errorf("lastTransitionTime %s, want the injected clock's %s", c.LastTransitionTime, start)
	}
	if c.ObservedGeneration != line.Generation || line.Status.ObservedGeneration != line.Generation {
		t.Errorf("observedGeneration condition %d status %d, want %d", c.ObservedGeneration, line.Status.ObservedGeneration, line.Generation)
	}
	ev := waitEvent(t, key.Namespace, key.Name, v1alpha1.ReasonInvalidSpec)
	if ev.Type != corev1.EventTypeWarning {
		t.Errorf("event type %s, want Warning", ev.Type)
	}
	mustContain(t, "event note", ev.Note, "spec.schedule.cron")

	// No retry storm: with nothing changing, the line is not reconciled again
	// and no second event appears.
	time.Sleep(time.Second)
	lineLabels := map[string]string{"namespace": key.Namespace, "line": key.Name}
	before := metricValue(t, "plumbline_line_reconciles_total", lineLabels)
	rv := line.ResourceVersion
	time.Sleep(3 * time.Second)
	if after := metricValue(t, "plumbline_line_reconciles_total", lineLabels); after != before {
		t.Errorf("the line was reconciled %v more times with nothing changed", after-before)
	}
	if err := k8s.Get(ctx, key, line); err != nil {
		t.Fatal(err)
	}
	if line.ResourceVersion != rv {
		t.Errorf("line was written again with nothing changed (resourceVersion %s -> %s)", rv, line.ResourceVersion)
	}
	if evs := eventsFor(t, key.Namespace, key.Name, v1alpha1.ReasonInvalidSpec); len(evs) != 1 || (evs[0].Series != nil && evs[0].Series.Count > 1) {
		t.Errorf("want one InvalidSpec event, got %d", len(evs))
	}

	// Fixing the spec (a spec change) wakes the line; the serving Deployment
	// is still missing.
	clk.SetTime(start.Add(10 * time.Minute))
	line.Spec.Schedule.Cron = "30 2 * * 1"
	line.Spec.Triggers[1].Query = "sum(rate(larkspur_deliveries_late_total[1h]))"
	if err := k8s.Update(ctx, line); err != nil {
		t.Fatal(err)
	}
	line = waitLineCondition(t, key, v1alpha1.ConditionReady, metav1.ConditionFalse, v1alpha1.ReasonServingNotFound)
	c = meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionReady)
	mustContain(t, "Ready message", c.Message, `Deployment "late-risk-scorer"`, "spec.serving.deploymentName")
	// The status stayed False, so the transition time is the first one.
	if !c.LastTransitionTime.Time.Equal(start.Truncate(time.Second)) {
		t.Errorf("lastTransitionTime moved to %s on a False->False change", c.LastTransitionTime)
	}
	waitEvent(t, key.Namespace, key.Name, v1alpha1.ReasonServingNotFound)

	// The Deployment appearing is seen through the Deployment watch.
	clk.SetTime(start.Add(20 * time.Minute))
	if err := k8s.Create(ctx, servingDeployment(key.Namespace, "late-risk-scorer", "scorer")); err != nil {
		t.Fatal(err)
	}
	line = waitLineCondition(t, key, v1alpha1.ConditionActionRequired, metav1.ConditionFalse, v1alpha1.ReasonNothingRequired)
	c = meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionActionRequired)
	if !c.LastTransitionTime.Time.Equal(start.Add(20 * time.Minute).Truncate(time.Second)) {
		t.Errorf("ActionRequired's lastTransitionTime %s, want the clock's time at recovery", c.LastTransitionTime)
	}
	// Nothing serves yet, so the line is not Ready, for a reason that needs
	// no person.
	if err := expectCondition(line.Status.Conditions, v1alpha1.ConditionReady, metav1.ConditionFalse, v1alpha1.ReasonNothingLive); err != nil {
		t.Error(err)
	}
	ev = waitEvent(t, key.Namespace, key.Name, v1alpha1.ReasonNothingLive)
	if ev.Type != corev1.EventTypeNormal {
		t.Errorf("recovery event type %s, want Normal", ev.Type)
	}
	mustContain(t, "recovery event", ev.Note, "ServingNotFound is resolved")
}

// A Deployment without the named container is not a place to serve from.
func TestServingContainerMissing(t *testing.T) {
	ctx := context.Background()
	ns := "container-missing"
	createNamespace(t, ns)
	if err := k8s.Create(ctx, servingDeployment(ns, "late-risk-scorer", "api", "metrics-proxy")); err != nil {
		t.Fatal(err)
	}
	o := sample(t, lineSample)
	o.SetNamespace(ns)
	mustSet(t, o, "spec.fallback", nil)
	if err := k8s.Create(ctx, o); err != nil {
		t.Fatal(err)
	}
	line := waitLineCondition(t, client.ObjectKeyFromObject(o), v1alpha1.ConditionReady, metav1.ConditionFalse, v1alpha1.ReasonServingNotFound)
	msg := meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionReady).Message
	mustContain(t, "Ready message", msg, `no container "scorer"`, "spec.serving.containerName", "api, metrics-proxy")

	// Renaming the container in the Deployment is seen through the watch.
	var dep appsv1.Deployment
	if err := k8s.Get(ctx, client.ObjectKey{Namespace: ns, Name: "late-risk-scorer"}, &dep); err != nil {
		t.Fatal(err)
	}
	dep.Spec.Template.Spec.Containers[0].Name = "scorer"
	if err := k8s.Update(ctx, &dep); err != nil {
		t.Fatal(err)
	}
	waitLineCondition(t, client.ObjectKeyFromObject(o), v1alpha1.ConditionActionRequired, metav1.ConditionFalse, v1alpha1.ReasonNothingRequired)
}

// The rule-based fallback must exist, be RuleBased and belong to the line.
func TestFallbackReference(t *testing.T) {
	ctx := context.Background()
	ns := "fallback-ref"
	createNamespace(t, ns)
	if err := k8s.Create(ctx, servingDeployment(ns, "late-risk-scorer", "scorer")); err != nil {
		t.Fatal(err)
	}
	o := sample(t, lineSample)
	o.SetNamespace(ns)
	if err := k8s.Create(ctx, o); err != nil {
		t.Fatal(err)
	}
	key := client.ObjectKeyFromObject(o)
	line := waitLineCondition(t, key, v1alpha1.ConditionReady, metav1.ConditionFalse, v1alpha1.ReasonFallbackNotFound)
	mustContain(t, "Ready message", meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionReady).Message,
		`"late-risk-rules"`, "spec.fallback.ruleBasedVersion", "source RuleBased")

	// An Imported version under the fallback's name is the wrong kind.
	wrong := &v1alpha1.ModelVersion{
		ObjectMeta: metav1.ObjectMeta{Namespace: ns, Name: "late-risk-rules"},
		Spec:       v1alpha1.ModelVersionSpec{Line: "late-risk", Source: v1alpha1.SourceImported, ArtifactURI: "s3://x/y"},
	}
	if err := k8s.Create(ctx, wrong); err != nil {
		t.Fatal(err)
	}
	line = waitLineCondition(t, key, v1alpha1.ConditionReady, metav1.ConditionFalse, v1alpha1.ReasonInvalidSpec)
	mustContain(t, "Ready message", meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionReady).Message,
		"spec.fallback.ruleBasedVersion:", "has source Imported", "must have source RuleBased")

	// Replaced by a proper rule-based version, the line is ready.
	if err := k8s.Delete(ctx, wrong); err != nil {
		t.Fatal(err)
	}
	waitLineCondition(t, key, v1alpha1.ConditionReady, metav1.ConditionFalse, v1alpha1.ReasonFallbackNotFound)
	rules := sample(t, rulesSample)
	rules.SetNamespace(ns)
	if err := k8s.Create(ctx, rules); err != nil {
		t.Fatal(err)
	}
	waitLineCondition(t, key, v1alpha1.ConditionActionRequired, metav1.ConditionFalse, v1alpha1.ReasonNothingRequired)
}

// A suspended line is not Ready, says it does not act, and needs no person.
func TestSuspendedLine(t *testing.T) {
	ctx := context.Background()
	ns := "suspended"
	createNamespace(t, ns)
	if err := k8s.Create(ctx, servingDeployment(ns, "late-risk-scorer", "scorer")); err != nil {
		t.Fatal(err)
	}
	o := sample(t, lineSample)
	o.SetNamespace(ns)
	mustSet(t, o, "spec.fallback", nil)
	mustSet(t, o, "spec.suspend", true)
	if err := k8s.Create(ctx, o); err != nil {
		t.Fatal(err)
	}
	line := waitLineCondition(t, client.ObjectKeyFromObject(o), v1alpha1.ConditionReady, metav1.ConditionFalse, v1alpha1.ReasonSuspended)
	mustContain(t, "Ready message", meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionReady).Message, "spec.suspend")
	if err := expectCondition(line.Status.Conditions, v1alpha1.ConditionActionRequired, metav1.ConditionFalse, v1alpha1.ReasonNothingRequired); err != nil {
		t.Error(err)
	}
}

// A version is adopted by its line (so deleting the line deletes it), also
// when the line appears after the version.
func TestVersionAdoption(t *testing.T) {
	ctx := context.Background()
	ns := "adoption"
	createNamespace(t, ns)
	v := sample(t, importedSample)
	v.SetNamespace(ns)
	if err := k8s.Create(ctx, v); err != nil {
		t.Fatal(err)
	}
	ev := waitEvent(t, ns, v.GetName(), "LineNotFound")
	mustContain(t, "event note", ev.Note, `"late-risk"`, "spec.line")
	var version v1alpha1.ModelVersion
	eventually(t, waitFor, func() error {
		if err := k8s.Get(ctx, client.ObjectKeyFromObject(v), &version); err != nil {
			return err
		}
		if version.Status.Phase != v1alpha1.PhasePending {
			return fmt.Errorf("phase %q, want Pending", version.Status.Phase)
		}
		return nil
	})

	line := sample(t, lineSample)
	line.SetNamespace(ns)
	if err := k8s.Create(ctx, line); err != nil {
		t.Fatal(err)
	}
	eventually(t, waitFor, func() error {
		if err := k8s.Get(ctx, client.ObjectKeyFromObject(v), &version); err != nil {
			return err
		}
		ref := metav1.GetControllerOf(&version)
		if ref == nil {
			return fmt.Errorf("version has no controller reference yet")
		}
		if ref.Kind != "ModelLine" || ref.Name != "late-risk" || ref.UID != line.GetUID() {
			return fmt.Errorf("controller reference %+v, want the line %s", ref, line.GetUID())
		}
		return nil
	})
}
