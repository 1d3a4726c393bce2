package ctl

import (
	"context"
	"encoding/json"
	"fmt"
	"sort"
	"strconv"
	"strings"
	"text/tabwriter"
	"time"

	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/runtime"
	"k8s.io/apimachinery/pkg/types"
	"k8s.io/apimachinery/pkg/util/duration"
	"k8s.io/apimachinery/pkg/watch"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/yaml"

	"plumbline.dev/plumbline/api/v1alpha1"
)

func (e *env) line(ctx context.Context, name string) (*v1alpha1.ModelLine, error) {
	var l v1alpha1.ModelLine
	if err := e.c.Get(ctx, types.NamespacedName{Namespace: e.ns, Name: name}, &l); err != nil {
		return nil, fmt.Errorf("modelline %s in namespace %s: %w", name, e.ns, err)
	}
	return &l, nil
}

func (e *env) version(ctx context.Context, name string) (*v1alpha1.ModelVersion, error) {
	var v v1alpha1.ModelVersion
	if err := e.c.Get(ctx, types.NamespacedName{Namespace: e.ns, Name: name}, &v); err != nil {
		return nil, fmt.Errorf("modelversion %s in namespace %s: %w", name, e.ns, err)
	}
	return &v, nil
}

// patch applies a JSON merge patch built from v.
func (e *env) patch(ctx context.Context, obj client.Object, v any) error {
	b, err := json.Marshal(v)
	if err != nil {
		return err
	}
	if err := e.c.Patch(ctx, obj, client.RawPatch(types.MergePatchType, b)); err != nil {
		return fmt.Errorf("patch %s: %w", obj.GetName(), err)
	}
	return nil
}

func (e *env) age(t *metav1.Time) string {
	if t == nil || t.IsZero() {
		return "-"
	}
	return duration.HumanDuration(e.o.now().Sub(t.Time))
}

func cond(l []metav1.Condition, typ string) *metav1.Condition {
	return meta.FindStatusCondition(l, typ)
}

func condStatus(l []metav1.Condition, typ string) string {
	if c := cond(l, typ); c != nil {
		return string(c.Status)
	}
	return "-"
}

func dash(s string) string {
	if s == "" {
		return "-"
	}
	return s
}

func clip(s string, n int) string {
	s = oneLine(s)
	if len(s) <= n {
		return s
	}
	return s[:n-3] + "..."
}

// triggerStates is "name=State" for each trigger.
func triggerStates(l *v1alpha1.ModelLine) string {
	var parts []string
	for _, t := range l.Status.Triggers {
		parts = append(parts, t.Name+"="+string(t.State))
	}
	return dash(strings.Join(parts, ","))
}

func runStatus(ctx context.Context, e *env, pos []string) error {
	if len(pos) == 1 {
		l, err := e.line(ctx, pos[0])
		if err != nil {
			return err
		}
		if e.o.output == outJSON || e.o.output == outYAML {
			return e.print(l)
		}
		return e.describe(l)
	}
	var lines v1alpha1.ModelLineList
	where := "namespace " + e.ns
	opts := []client.ListOption{client.InNamespace(e.ns)}
	if e.o.allNamespaces {
		where, opts = "any namespace", nil
	}
	if err := e.c.List(ctx, &lines, opts...); err != nil {
		return fmt.Errorf("list modellines in %s: %w", where, err)
	}
	if e.o.output == outJSON || e.o.output == outYAML {
		return e.print(&lines)
	}
	if len(lines.Items) == 0 && !e.o.watch {
		fmt.Fprintf(e.out, "No model lines in %s.\n", where)
		return nil
	}
	t := e.lineTable()
	t.header()
	for i := range lines.Items {
		t.row(&lines.Items[i])
	}
	if err := t.flush(); err != nil || !e.o.watch {
		return err
	}
	return e.watchLines(ctx, lines.ResourceVersion, opts, t)
}

// watchLines prints a line's row each time it changes, until ctx ends.
func (e *env) watchLines(ctx context.Context, from string, opts []client.ListOption, t *lineTable) error {
	w, err := e.c.Watch(ctx, &v1alpha1.ModelLineList{}, append(opts, &client.ListOptions{Raw: &metav1.ListOptions{ResourceVersion: from}})...)
	if err != nil {
		return fmt.Errorf("watch modellines: %w", err)
	}
	defer w.Stop()
	for {
		select {
		case <-ctx.Done():
			return nil
		case ev, ok := <-w.ResultChan():
			if !ok {
				return nil
			}
			l, isLine := ev.Object.(*v1alpha1.ModelLine)
			if !isLine {
				continue
			}
			if ev.Type == watch.Deleted {
				fmt.Fprintf(e.out, "%s deleted\n", l.Name)
				continue
			}
			t.row(l)
			if err := t.flush(); err != nil {
				return err
			}
		}
	}
}

// lineTable prints lines as rows, with -A's NAMESPACE and -o wide's
// columns. Rows printed after the first flush (--watch) keep the widths
// the table had.
type lineTable struct {
	e      *env
	rows   [][]string
	widths []int
}

func (e *env) lineTable() *lineTable { return &lineTable{e: e} }

func (t *lineTable) header() {
	h := []string{"LINE", "LIVE", "READY", "ACTION REQUIRED", "IN FLIGHT", "AWAITING APPROVAL", "FALLBACK", "TRIGGERS", "GUARD", "AGE"}
	if t.e.o.output == outWide {
		h = append(h, "BLOCKED", "NEEDS REVIEW", "PREVIOUS", "NEXT SCHEDULE")
	}
	if t.e.o.allNamespaces {
		h = append([]string{"NAMESPACE"}, h...)
	}
	t.rows = append(t.rows, h)
}

func (t *lineTable) row(l *v1alpha1.ModelLine) {
	guard := "-"
	if l.Status.Guard != nil {
		guard = string(l.Status.Guard.State)
	}
	r := []string{l.Name, dash(l.Status.LiveVersion), condStatus(l.Status.Conditions, v1alpha1.ConditionReady), actionRequired(l),
		dash(l.Status.ActiveVersion), dash(awaiting(l)), condStatus(l.Status.Conditions, v1alpha1.ConditionFallbackActive),
		triggerStates(l), guard, t.e.age(&l.CreationTimestamp)}
	if t.e.o.output == outWide {
		next := "-"
		if n := l.Status.NextScheduleTime; n != nil {
			next = n.UTC().Format(time.RFC3339)
		}
		r = append(r, condStatus(l.Status.Conditions, v1alpha1.ConditionBlocked), condStatus(l.Status.Conditions, v1alpha1.ConditionNeedsReview),
			dash(l.Status.PreviousVersion), next)
	}
	if t.e.o.allNamespaces {
		r = append([]string{l.Namespace}, r...)
	}
	t.rows = append(t.rows, r)
}

// flush prints the rows held, aligned as kubectl aligns: each column as
// wide as its widest cell so far, two spaces apart.
func (t *lineTable) flush() error {
	for _, r := range t.rows {
		for i, c := range r {
			if i >= len(t.widths) {
				t.widths = append(t.widths, 0)
			}
			t.widths[i] = max(t.widths[i], len(c))
		}
	}
	for _, r := range t.rows {
		var b strings.Builder
		for i, c := range r {
			if i == len(r)-1 {
				b.WriteString(c)
				break
			}
			fmt.Fprintf(&b, "%-*s  ", t.widths[i], c)
		}
		if _, err := fmt.Fprintln(t.e.out, b.String()); err != nil {
			return err
		}
	}
	t.rows = nil
	return nil
}

// print writes objects as -o json or -o yaml asks, with their kind and
// without managedFields, as kubectl get does.
func (e *env) print(obj runtime.Object) error {
	obj = obj.DeepCopyObject()
	scheme := e.c.Scheme()
	setKind := func(o runtime.Object) error {
		gvks, _, err := scheme.ObjectKinds(o)
		if err != nil || len(gvks) == 0 {
			return fmt.Errorf("the kind of %T: %w", o, err)
		}
		o.GetObjectKind().SetGroupVersionKind(gvks[0])
		if m, err := meta.Accessor(o); err == nil {
			m.SetManagedFields(nil)
		}
		return nil
	}
	if meta.IsListType(obj) {
		items, err := meta.ExtractList(obj)
		if err != nil {
			return err
		}
		for _, it := range items {
			if err := setKind(it); err != nil {
				return err
			}
		}
		if err := meta.SetList(obj, items); err != nil {
			return err
		}
	}
	if err := setKind(obj); err != nil {
		return err
	}
	b, err := json.MarshalIndent(obj, "", "    ")
	if err != nil {
		return err
	}
	if e.o.output == outYAML {
		if b, err = yaml.JSONToYAML(b); err != nil {
			return err
		}
	} else {
		b = append(b, '\n')
	}
	_, err = e.out.Write(b)
	return err
}

// describe prints one line in full.
func (e *env) describe(l *v1alpha1.ModelLine) error {
	st := &l.Status
	fmt.Fprintf(e.out, "ModelLine %s/%s\n", l.Namespace, l.Name)
	fmt.Fprintf(e.out, "  Live:       %s", dash(st.LiveVersion))
	if st.PreviousVersion != "" {
		fmt.Fprintf(e.out, " (previous %s)", st.PreviousVersion)
	}
	fmt.Fprintln(e.out)
	fmt.Fprintf(e.out, "  In flight:  %s\n", dash(st.ActiveVersion))
	if v := awaiting(l); v != "" {
		fmt.Fprintf(e.out, "  Waiting for a person: %s passed the gate (kubectl plumbline approve %s, or reject %s)\n", v, v, v)
	}
	fmt.Fprintf(e.out, "  Serving:    Deployment %s, container %s, env %s\n", l.Spec.Serving.DeploymentName, l.Spec.Serving.ContainerName, l.Spec.Serving.ArtifactEnv)
	if st.NextScheduleTime != nil {
		fmt.Fprintf(e.out, "  Next scheduled start: %s\n", st.NextScheduleTime.UTC().Format(time.RFC3339))
	}
	if st.LastRetrainRequest != "" || st.LastRollbackRequest != "" {
		fmt.Fprintf(e.out, "  Last requests: retrain %s, rollback %s\n", dash(st.LastRetrainRequest), dash(st.LastRollbackRequest))
	}
	tw := tabwriter.NewWriter(e.out, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "\nCONDITION\tSTATUS\tREASON\tSINCE\tMESSAGE")
	for _, c := range st.Conditions {
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\n", c.Type, c.Status, c.Reason, e.age(&c.LastTransitionTime), clip(c.Message, 110))
	}
	if len(st.Triggers) > 0 || st.Guard != nil {
		fmt.Fprintln(tw, "\nWATCH\tSTATE\tVALUE\tSINCE\tMESSAGE")
		for _, t := range st.Triggers {
			fmt.Fprintf(tw, "trigger %s\t%s\t%s\t%s\t%s\n", t.Name, t.State, dash(t.Value), e.age(t.Since), clip(t.Message, 110))
		}
		if g := st.Guard; g != nil {
			fmt.Fprintf(tw, "guard on %s\t%s\t%s\t%s\t%s\n", dash(g.Name), g.State, dash(g.Value), e.age(g.Since), clip(g.Message, 110))
		}
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	if c := st.LastCheck; c != nil {
		fmt.Fprintf(e.out, "\nLast check Job %s (for %s): data quality %s, drift %s, %d rows. %s\n", c.Job, dash(c.Reason),
			dash(string(c.DataQuality)), dash(string(c.Drift)), c.Rows, oneLine(c.Message))
	}
	return nil
}

// lineAndVersions reads a line and its versions.
func (e *env) lineAndVersions(ctx context.Context, name string) (*v1alpha1.ModelLine, []v1alpha1.ModelVersion, error) {
	l, err := e.line(ctx, name)
	if err != nil {
		return nil, nil, err
	}
	var list v1alpha1.ModelVersionList
	if err := e.c.List(ctx, &list, client.InNamespace(e.ns)); err != nil {
		return nil, nil, fmt.Errorf("list modelversions in namespace %s: %w", e.ns, err)
	}
	var vs []v1alpha1.ModelVersion
	for _, v := range list.Items {
		if v.Spec.Line == l.Name {
			vs = append(vs, v)
		}
	}
	return l, vs, nil
}

func runHistory(ctx context.Context, e *env, pos []string) error {
	l, vs, err := e.lineAndVersions(ctx, pos[0])
	if err != nil {
		return err
	}
	if e.o.output == outJSON || e.o.output == outYAML {
		return e.print(&v1alpha1.ModelVersionList{Items: vs})
	}
	if len(vs) == 0 {
		fmt.Fprintf(e.out, "Line %s has no versions yet.\n", l.Name)
		return nil
	}
	sort.SliceStable(vs, func(i, j int) bool {
		if a, b := number(&vs[i]), number(&vs[j]); a != b {
			return a > b
		}
		return vs[i].CreationTimestamp.After(vs[j].CreationTimestamp.Time)
	})
	tw := tabwriter.NewWriter(e.out, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "VERSION\tSOURCE\tSTARTED BY\tPHASE\tGATE\tAGE\tWHY")
	for _, v := range vs {
		gate := "-"
		if v.Status.Gate != nil {
			gate = string(v.Status.Gate.Verdict)
		}
		phase := string(v.Status.Phase)
		if v.Name == l.Status.LiveVersion {
			phase += " (serving)"
		}
		why := v.Status.Message
		if v.Status.Reason != "" {
			why = v.Status.Reason + ": " + why
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\n", v.Name, v.Spec.Source, dash(v.Spec.Cause), dash(phase), gate, e.age(&v.CreationTimestamp), clip(why, 100))
	}
	return tw.Flush()
}

// number is a version's sequence number in its line: the controller's
// plumbline.dev/number label on the versions it starts; 0 for versions
// created by hand (imported, rule-based), which sort after.
func number(v *v1alpha1.ModelVersion) int {
	n, err := strconv.Atoi(v.Labels[v1alpha1.NumberLabel])
	if err != nil {
		return int(v.Status.Number)
	}
	return n
}

// decide sets spec.decision on a version whose phase allows it.
func (e *env) decide(ctx context.Context, name string, d v1alpha1.Decision, allowed []v1alpha1.VersionPhase, rule string) error {
	v, err := e.version(ctx, name)
	if err != nil {
		return err
	}
	ok := false
	for _, p := range allowed {
		ok = ok || v.Status.Phase == p
	}
	if !ok {
		return fmt.Errorf("%s is %s: %s", name, dash(string(v.Status.Phase)), rule)
	}
	if v.Spec.Decision != "" && v.Spec.Decision != d {
		return fmt.Errorf("%s already has spec.decision %s: a decision is made once (the API server refuses a change); to try again, retrain for a new version", name, v.Spec.Decision)
	}
	spec := map[string]any{"decision": d}
	if e.o.note != "" {
		spec["decisionNote"] = e.o.note
	}
	return e.patch(ctx, v, map[string]any{"spec": spec})
}

func runApprove(ctx context.Context, e *env, pos []string) error {
	if err := e.decide(ctx, pos[0], v1alpha1.DecisionApproved, []v1alpha1.VersionPhase{v1alpha1.PhaseAwaitingApproval},
		"only a candidate that passed the gate and waits for a person (AwaitingApproval) can be approved"); err != nil {
		return err
	}
	fmt.Fprintf(e.out, "modelversion %s approved: the controller rolls it out (kubectl plumbline history to follow it)\n", pos[0])
	return nil
}

func runReject(ctx context.Context, e *env, pos []string) error {
	if err := e.decide(ctx, pos[0], v1alpha1.DecisionRejected,
		[]v1alpha1.VersionPhase{"", v1alpha1.PhasePending, v1alpha1.PhaseTraining, v1alpha1.PhaseEvaluating, v1alpha1.PhaseAwaitingApproval},
		"a version can be rejected only before its rollout (Pending, Training, Evaluating or AwaitingApproval); to stop a live one, roll back"); err != nil {
		return err
	}
	fmt.Fprintf(e.out, "modelversion %s rejected: the controller stops it and the live version stays\n", pos[0])
	return nil
}

func runRetrain(ctx context.Context, e *env, pos []string) error {
	l, err := e.line(ctx, pos[0])
	if err != nil {
		return err
	}
	token := e.token()
	if token == l.Status.LastRetrainRequest || token == l.Annotations[v1alpha1.RetrainRequestAnnotation] {
		return fmt.Errorf("token %q was already used on %s: each token acts once; give another with --token", token, l.Name)
	}
	if err := e.patch(ctx, l, map[string]any{"metadata": map[string]any{"annotations": map[string]string{v1alpha1.RetrainRequestAnnotation: token}}}); err != nil {
		return err
	}
	fmt.Fprintf(e.out, "asked %s for a retrain (token %s): it goes through the line's checks and waits for any version in flight\n", l.Name, token)
	return nil
}

func runRollback(ctx context.Context, e *env, pos []string) error {
	if e.o.to == "" {
		return fmt.Errorf("--to is required: the archived or rule-based version of %s to serve again", pos[0])
	}
	l, err := e.line(ctx, pos[0])
	if err != nil {
		return err
	}
	v, err := e.version(ctx, e.o.to)
	if err != nil {
		return err
	}
	switch {
	case v.Spec.Line != l.Name:
		return fmt.Errorf("%s belongs to line %q, not %s", v.Name, v.Spec.Line, l.Name)
	case v.Status.Phase == v1alpha1.PhaseLive:
		// The version's own phase, not the line's liveVersion: the line's
		// status is written after its versions' in a pass, so for a moment
		// it can still name the version a rollback has just replaced.
		return fmt.Errorf("%s is already live on %s", v.Name, l.Name)
	case v.Status.Phase != v1alpha1.PhaseArchived && v.Spec.Source != v1alpha1.SourceRuleBased:
		return fmt.Errorf("%s is %s: a rollback serves an archived version or the rule-based one", v.Name, dash(string(v.Status.Phase)))
	}
	// The version and a token: each value acts once, so the same version can
	// be asked for again.
	token := e.token()
	value := v.Name + "/" + token
	if value == l.Status.LastRollbackRequest || value == l.Annotations[v1alpha1.RollbackRequestAnnotation] {
		return fmt.Errorf("token %q was already used on %s: each token acts once; give another with --token", token, l.Name)
	}
	if err := e.patch(ctx, l, map[string]any{"metadata": map[string]any{"annotations": map[string]string{v1alpha1.RollbackRequestAnnotation: value}}}); err != nil {
		return err
	}
	fmt.Fprintf(e.out, "asked %s to serve %s again: the controller rolls the Deployment to it\n", l.Name, v.Name)
	return nil
}

// awaiting is the candidate that waits for a person's decision, if any.
func awaiting(l *v1alpha1.ModelLine) string {
	if condStatus(l.Status.Conditions, v1alpha1.ConditionAwaitingApproval) != string(metav1.ConditionTrue) {
		return ""
	}
	return l.Status.ActiveVersion
}

// token is a request's token: --token, else one from the time.
func (e *env) token() string {
	if e.o.token != "" {
		return e.o.token
	}
	return "kubectl-" + e.o.now().UTC().Format("20060102-150405")
}

// actionRequired is the reason a person must act on the line, or "-".
func actionRequired(l *v1alpha1.ModelLine) string {
	if c := meta.FindStatusCondition(l.Status.Conditions, v1alpha1.ConditionActionRequired); c != nil && c.Status == metav1.ConditionTrue {
		return c.Reason
	}
	return "-"
}
