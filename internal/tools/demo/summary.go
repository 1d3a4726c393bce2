package demo

import (
	"context"
	"fmt"
	"io"
	"net/http"
	"sort"
	"strings"
	"text/tabwriter"

	appsv1 "k8s.io/api/apps/v1"
	batchv1 "k8s.io/api/batch/v1"
	"k8s.io/apimachinery/pkg/api/meta"
	"k8s.io/apimachinery/pkg/types"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// summary prints the lines, versions and Jobs as kubectl would, what each
// version served, and the line's metrics as Prometheus would scrape them;
// it fills in the result.
func (d *player) summary(metricsAddr string) error {
	if err := d.printEvents(); err != nil {
		return err
	}
	fmt.Fprintf(d.out, "\n== Summary\n\n")
	var lines v1alpha1.ModelLineList
	if err := d.c.List(d.ctx, &lines, client.InNamespace(namespace)); err != nil {
		return fmt.Errorf("list lines: %w", err)
	}
	tw := tabwriter.NewWriter(d.out, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "MODELLINE\tREADY\tLIVE\tPREVIOUS\tFALLBACK\tLAST RETRAIN OUTCOME")
	for _, l := range lines.Items {
		cond := func(typ string, reason bool) string {
			c := meta.FindStatusCondition(l.Status.Conditions, typ)
			switch {
			case c == nil:
				return "-"
			case reason:
				return c.Reason
			}
			return string(c.Status)
		}
		fallback := cond(v1alpha1.ConditionFallbackActive, false)
		if fallback == "True" {
			fallback += " (" + cond(v1alpha1.ConditionFallbackActive, true) + ")"
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\n", l.Name, cond(v1alpha1.ConditionReady, false), orDash(l.Status.LiveVersion),
			orDash(l.Status.PreviousVersion), fallback, cond(v1alpha1.ConditionRetraining, true))
		if l.Name == lineName {
			d.result.Live = l.Status.LiveVersion
		}
	}
	fmt.Fprintln(tw)
	var versions v1alpha1.ModelVersionList
	if err := d.c.List(d.ctx, &versions, client.InNamespace(namespace)); err != nil {
		return fmt.Errorf("list versions: %w", err)
	}
	d.result.ServedBy = d.sim.servedBy()
	fmt.Fprintln(tw, "MODELVERSION\tSOURCE\tCAUSE\tPHASE\tGATE\tPARCELS SCORED")
	for _, v := range versions.Items {
		verdict := "-"
		if v.Status.Gate != nil {
			verdict = string(v.Status.Gate.Verdict)
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%d\n", v.Name, v.Spec.Source, orDash(v.Spec.Cause), v.Status.Phase, verdict, d.result.ServedBy[v.Name])
	}
	fmt.Fprintln(tw)
	var jobs batchv1.JobList
	if err := d.c.List(d.ctx, &jobs, client.InNamespace(namespace)); err != nil {
		return fmt.Errorf("list jobs: %w", err)
	}
	d.result.Jobs = map[string]int{}
	d.result.PodRuns = d.exec.podRuns()
	fmt.Fprintln(tw, "JOB\tVERSION\tROLE\tSTATUS\tPODS RUN")
	for _, j := range jobs.Items {
		status := "Running"
		for _, c := range j.Status.Conditions {
			if (c.Type == batchv1.JobComplete || c.Type == batchv1.JobFailed) && c.Status == "True" {
				status = string(c.Type)
			}
		}
		version, role := j.Labels[v1alpha1.VersionLabel], j.Labels[v1alpha1.RoleLabel]
		key := version + "/" + role
		if version == "" {
			key = j.Name // the line's own Jobs (checks) are numbered
		}
		d.result.Jobs[key]++
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%d\n", j.Name, orDash(version), role, status, d.result.PodRuns[j.Name])
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	var dep appsv1.Deployment
	if err := d.c.Get(d.ctx, types.NamespacedName{Namespace: namespace, Name: scorer}, &dep); err == nil {
		fmt.Fprintf(d.out, "\nThe scorer Deployment serves %s (%s=%s), %d of %d replicas updated and available.\n", modelURI(&dep),
			v1alpha1.VersionAnnotation, dep.Spec.Template.Annotations[v1alpha1.VersionAnnotation], dep.Status.AvailableReplicas, *dep.Spec.Replicas)
	}

	metrics, err := scrape(d.ctx, "http://"+metricsAddr+"/metrics", "plumbline_line_condition", "plumbline_live_version_info",
		"plumbline_gate_decisions_total", "plumbline_promotions_total", "plumbline_rollbacks_total", "plumbline_retrain_decisions_total")
	if err != nil {
		return err
	}
	fmt.Fprintf(d.out, "\nWhat Prometheus scrapes from the manager:\n%s\n", metrics)
	fmt.Fprintln(d.out, "\nEvery parcel above was synthetic. The models were trained and gated for real on it (plumbline demo")
	fmt.Fprintln(d.out, "train, plumbline evaluate); the executor and the serving simulator stood in for the kubelet and for")
	fmt.Fprintln(d.out, "Larkspur's traffic and monitoring, which a real cluster has.")
	return nil
}

func modelURI(dep *appsv1.Deployment) string {
	for _, c := range dep.Spec.Template.Spec.Containers {
		for _, e := range c.Env {
			if e.Name == "MODEL_URI" {
				return e.Value
			}
		}
	}
	return "no model"
}

// scrape fetches a metrics page and keeps the demo line's series of some
// metrics.
func scrape(ctx context.Context, url string, metrics ...string) (string, error) {
	req, err := http.NewRequestWithContext(ctx, http.MethodGet, url, nil)
	if err != nil {
		return "", err
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		return "", fmt.Errorf("scrape manager metrics: %w", err)
	}
	defer resp.Body.Close()
	body, err := io.ReadAll(resp.Body)
	if err != nil {
		return "", fmt.Errorf("read manager metrics: %w", err)
	}
	var keep []string
	for _, m := range metrics {
		for _, l := range strings.Split(string(body), "\n") {
			if strings.HasPrefix(l, m+"{") && strings.Contains(l, `namespace="`+namespace+`"`) {
				keep = append(keep, "    "+l)
			}
		}
	}
	sort.Strings(keep)
	return strings.Join(keep, "\n"), nil
}
