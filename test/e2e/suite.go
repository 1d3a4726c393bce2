// Package e2e is the end-to-end suite for any cluster: given a kubeconfig
// and the plumbline image as the cluster's nodes know it, it installs
// plumbline the way the README's "Install in a cluster" says (kubectl apply
// --server-side -k of an overlay of config/default), deploys a Prometheus,
// and plays the Larkspur Parcels story (synthetic data) with real
// containers: the scorer's pods serve with `plumbline demo serve`, the
// line's Jobs train, check and gate in the plumbline image, the gate's
// report comes through the container's termination message, Prometheus
// scrapes the pods, and the controller, a pod under its own ServiceAccount
// and RBAC, promotes, refuses and rolls back. It waits the way a user
// would, with kubectl wait.
//
// Run plays it; e2e_test.go runs it on this machine's real node, or on the
// cluster PLUMBLINE_E2E_KUBECONFIG names (kind, in a user's CI). make
// demo-real prints its timeline.
package e2e

import (
	"bytes"
	"context"
	_ "embed"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"sort"
	"strings"
	"sync"
	"text/template"
	"time"

	batchv1 "k8s.io/api/batch/v1"
	eventsv1 "k8s.io/api/events/v1"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/types"
	"k8s.io/client-go/kubernetes"
	"k8s.io/client-go/tools/clientcmd"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/manager"
	"plumbline.dev/plumbline/internal/tools/demo"
)

var (
	//go:embed manifests/prometheus.yaml
	prometheusManifest string
	//go:embed manifests/larkspur.yaml
	larkspurManifest string
	//go:embed manifests/world-job.yaml
	worldJobManifest string
	//go:embed manifests/vendor.yaml
	vendorManifest string
)

// Options say which cluster and images the suite uses.
type Options struct {
	// Kubeconfig is the cluster's kubeconfig (an administrator's).
	Kubeconfig string
	// Image is the plumbline image as the cluster's nodes know it (kind
	// load image-archive, ctr images import, or a registry).
	Image string
	// PrometheusImage is the image of the suite's Prometheus; its program
	// is /bin/prometheus (as in the Prometheus project's own image).
	PrometheusImage string
	// SharedPath is the directory on the node that the story's pods share
	// (a hostPath; the suite creates it).
	SharedPath string
	// RepoRoot is the plumbline checkout whose config/default is installed.
	RepoRoot string
	// StepTimeout bounds each wait; zero means 4 minutes.
	StepTimeout time.Duration
	// Out receives the timeline.
	Out io.Writer
}

// Defaults for a kind cluster.
const (
	DefaultImage           = "plumbline:dev"
	DefaultPrometheusImage = "quay.io/prometheus/prometheus:v2.53.4"
	DefaultSharedPath      = "/var/lib/plumbline-e2e"
)

// Result is what happened, for the test to judge.
type Result struct {
	// Blocked: a retrain was refused for a data-quality breach.
	Blocked bool
	// Promoted are the versions that went live, in order.
	Promoted []string
	// Rejected are the candidates the gate refused.
	Rejected []string
	// RolledBack are the versions the guard rolled back.
	RolledBack []string
	// Live is the live version at the end.
	Live string
	// Gates are the gate's judgements of each version it judged, read
	// from the reports in the containers' termination messages.
	Gates map[string]*v1alpha1.GateResult
	// Jobs are the line's Jobs at the end, by name.
	Jobs map[string]JobRun
	// ScrapedVersions are the versions Prometheus saw scorer pods serve.
	ScrapedVersions []string
	// ManagerSeries is how many plumbline_line_condition_since_timestamp_seconds series of
	// the line Prometheus scraped from the manager's pod.
	ManagerSeries int
	// Timings: the manager's pod and Prometheus available after apply,
	// and the whole story.
	Timings map[string]time.Duration
}

// JobRun is one of the line's Jobs.
type JobRun struct {
	Role      string
	Version   string
	Succeeded bool
	// Took is from the Job's start to its completion.
	Took time.Duration
}

const (
	namespace = "larkspur"
	lineName  = "late-risk"
)

type suite struct {
	o       Options
	ctx     context.Context
	c       client.Client
	cs      kubernetes.Interface
	start   time.Time
	result  *Result
	overlay string

	mu   sync.Mutex
	seen map[types.UID]bool
}

// Run plays the story on the cluster. It returns the result so far with an
// error when a step does not go as told.
func Run(ctx context.Context, o Options) (*Result, error) {
	if o.StepTimeout == 0 {
		o.StepTimeout = 4 * time.Minute
	}
	if o.Out == nil {
		o.Out = io.Discard
	}
	for name, v := range map[string]string{"Kubeconfig": o.Kubeconfig, "Image": o.Image, "PrometheusImage": o.PrometheusImage, "SharedPath": o.SharedPath, "RepoRoot": o.RepoRoot} {
		if v == "" {
			return nil, fmt.Errorf("e2e: Options.%s is required", name)
		}
	}
	if _, err := exec.LookPath("kubectl"); err != nil {
		return nil, errors.New("e2e: kubectl is not on the PATH (make kubectl builds one into bin/k8s)")
	}
	cfg, err := clientcmd.BuildConfigFromFlags("", o.Kubeconfig)
	if err != nil {
		return nil, fmt.Errorf("e2e: kubeconfig %s: %w", o.Kubeconfig, err)
	}
	scheme, err := manager.Scheme()
	if err != nil {
		return nil, err
	}
	s := &suite{o: o, ctx: ctx, start: time.Now(), seen: map[types.UID]bool{},
		result: &Result{Gates: map[string]*v1alpha1.GateResult{}, Jobs: map[string]JobRun{}, Timings: map[string]time.Duration{}}}
	if s.c, err = client.New(cfg, client.Options{Scheme: scheme}); err != nil {
		return nil, fmt.Errorf("e2e: client: %w", err)
	}
	if s.cs, err = kubernetes.NewForConfig(cfg); err != nil {
		return nil, fmt.Errorf("e2e: client: %w", err)
	}
	if err := s.c.Get(ctx, types.NamespacedName{Name: namespace}, &metav1.PartialObjectMetadata{TypeMeta: metav1.TypeMeta{APIVersion: "v1", Kind: "Namespace"}}); err == nil {
		return nil, fmt.Errorf("e2e: namespace %s exists: the suite needs a cluster without it (kubectl delete namespace %s)", namespace, namespace)
	}
	dir, err := os.MkdirTemp("", "plumbline-e2e-")
	if err != nil {
		return nil, err
	}
	defer os.RemoveAll(dir)
	s.overlay = dir

	// Print the line's events while the story plays.
	pctx, stopPrinting := context.WithCancel(ctx)
	printed := make(chan struct{})
	go func() {
		defer close(printed)
		for {
			s.printEvents()
			select {
			case <-pctx.Done():
				return
			case <-time.After(time.Second):
			}
		}
	}()
	err = s.story()
	stopPrinting()
	<-printed
	s.printEvents()
	s.result.Timings["whole story"] = time.Since(s.start)
	if err != nil {
		s.diagnose()
	}
	return s.result, err
}

func (s *suite) say(format string, args ...any) {
	s.mu.Lock()
	defer s.mu.Unlock()
	el := time.Since(s.start).Round(time.Second)
	fmt.Fprintf(s.o.Out, "[%02d:%02d] %s\n", int(el.Minutes()), int(el.Seconds())%60, fmt.Sprintf(format, args...))
}

func (s *suite) step(n int, title string) {
	s.mu.Lock()
	defer s.mu.Unlock()
	fmt.Fprintf(s.o.Out, "\n== %d. %s\n", n, title)
}

func (s *suite) story() error {
	s.say("plumbline end-to-end: Larkspur Parcels, a fictional courier. Every name, number and parcel is synthetic.")

	s.step(1, "A Prometheus, then plumbline from config/default, as the README installs it")
	t0 := time.Now()
	if err := s.apply(render(prometheusManifest, s.vars())); err != nil {
		return err
	}
	if err := s.kubectl("-n", "monitoring", "wait", "--for=condition=Available", "deployment/prometheus", s.timeout()); err != nil {
		return err
	}
	s.result.Timings["Prometheus available after apply"] = time.Since(t0)
	ip, err := s.output("-n", "monitoring", "get", "service", "prometheus", "-o", "jsonpath={.spec.clusterIP}")
	if err != nil {
		return err
	}
	promURL := "http://" + ip + ":9090"
	s.say("Prometheus available at %s (the Service's cluster IP: the suite runs on clusters without DNS too)", promURL)
	if err := s.writeOverlay(promURL); err != nil {
		return err
	}
	t1 := time.Now()
	if err := s.kubectl("apply", "--server-side", "-k", s.overlay); err != nil {
		return err
	}
	if err := s.kubectl("-n", "plumbline-system", "wait", "--for=condition=Available", "deployment/plumbline-manager", s.timeout()); err != nil {
		return err
	}
	s.result.Timings["manager available after apply"] = time.Since(t1)
	s.say("plumbline-manager is Available (image %s, under ServiceAccount plumbline-manager)", s.o.Image)

	s.step(2, "Larkspur's scorer serves its old rules; the line and its versions are applied")
	if err := s.apply("apiVersion: v1\nkind: Namespace\nmetadata:\n  name: " + namespace + "\n"); err != nil {
		return err
	}
	if err := s.worldJob("world-init", "init"); err != nil {
		return err
	}
	if err := s.apply(render(larkspurManifest, s.vars())); err != nil {
		return err
	}
	if err := s.waitPhase("late-risk-v0", v1alpha1.PhaseLive); err != nil {
		return err
	}
	s.result.Promoted = append(s.result.Promoted, "late-risk-v0")
	if err := s.kubectl("-n", namespace, "wait", "--for=condition=Ready", "modelline/"+lineName, s.timeout()); err != nil {
		return err
	}
	s.say("ModelVersion late-risk-v0 is Live and the line Ready: the scorer's pods serve it")
	if err := s.probationEnds("late-risk-v0"); err != nil {
		return err
	}

	s.step(3, "The Fenwick depot opens and the address feed breaks: the retrain is refused")
	if err := s.worldJob("world-fenwick", "change", "--fenwick", "--feed-broken",
		"--note=the Fenwick depot opens (40% of parcels, rural routes) and the address feed loses 30% of addresses"); err != nil {
		return err
	}
	if err := s.kubectl("-n", namespace, "wait", "--for=condition=Blocked", "modelline/"+lineName, s.timeout()); err != nil {
		return err
	}
	line, err := s.line()
	if err != nil {
		return err
	}
	c := meta.FindStatusCondition(line.Status.Conditions, v1alpha1.ConditionBlocked)
	s.result.Blocked = c != nil && c.Reason == "DataQualityIssue"
	s.say("ModelLine late-risk is Blocked (%s): %s", c.Reason, c.Message)

	s.step(4, "The feed is fixed: the checks pass, a training Job and a gate Job run, v1 goes live")
	if err := s.worldJob("world-feed-fixed", "change", "--fenwick", "--note=the address feed is fixed, and its vendor backfills the lost addresses"); err != nil {
		return err
	}
	if err := s.waitPhase("late-risk-v1", v1alpha1.PhaseLive); err != nil {
		return err
	}
	s.result.Promoted = append(s.result.Promoted, "late-risk-v1")
	s.say("ModelVersion late-risk-v1 is Live")
	if err := s.probationEnds("late-risk-v1"); err != nil {
		return err
	}

	s.step(5, "A vendor's model is imported by hand: the gate refuses it")
	if err := s.apply(vendorManifest); err != nil {
		return err
	}
	if err := s.waitPhase("late-risk-vendor", v1alpha1.PhaseRejected); err != nil {
		return err
	}
	s.result.Rejected = append(s.result.Rejected, "late-risk-vendor")
	s.say("ModelVersion late-risk-vendor is Rejected by the gate")

	s.step(6, "The pre-holiday peak: quality falls, a retrain learns the peak")
	if err := s.worldJob("world-peak", "change", "--fenwick", "--peak", "--note=the pre-holiday peak starts: heavy parcels, vans fill up, town routes jam"); err != nil {
		return err
	}
	var peak string
	if err := s.poll("a version newer than late-risk-v1 to be Live", func() (bool, error) {
		l, err := s.line()
		if err != nil {
			return false, err
		}
		peak = l.Status.LiveVersion
		return peak != "" && peak != "late-risk-v1", nil
	}); err != nil {
		return err
	}
	if err := s.waitPhase(peak, v1alpha1.PhaseLive); err != nil {
		return err
	}
	s.result.Promoted = append(s.result.Promoted, peak)
	s.say("ModelVersion %s is Live", peak)

	s.step(7, "The peak ends the day "+peak+" goes live: it regresses and the guard rolls it back")
	if err := s.worldJob("world-peak-ends", "change", "--fenwick", "--note=the peak ends: ordinary traffic again"); err != nil {
		return err
	}
	if err := s.kubectl("-n", namespace, "wait", "--for=condition=FallbackActive", "modelline/"+lineName, s.timeout()); err != nil {
		return err
	}
	if err := s.waitPhase("late-risk-v1", v1alpha1.PhaseLive); err != nil {
		return err
	}
	s.result.RolledBack = append(s.result.RolledBack, peak)
	s.result.Promoted = append(s.result.Promoted, "late-risk-v1")
	s.say("the guard rolled %s back: late-risk-v1 is Live again", peak)

	s.step(8, "What Prometheus saw, and what the Jobs did")
	return s.collect()
}

// vars are the manifests' template values.
func (s *suite) vars() map[string]string {
	return map[string]string{"Image": s.o.Image, "PrometheusImage": s.o.PrometheusImage, "SharedPath": s.o.SharedPath}
}

// writeOverlay writes the kustomization the suite installs: config/default
// with the image and the Prometheus address set, as a user's overlay
// would (docs/install.md shows the same).
func (s *suite) writeOverlay(promURL string) error {
	rel, err := filepath.Rel(s.overlay, filepath.Join(s.o.RepoRoot, "config", "default"))
	if err != nil {
		return err
	}
	name, tag := s.o.Image, "latest"
	if i := strings.LastIndex(name, ":"); i > strings.LastIndex(name, "/") {
		name, tag = name[:i], name[i+1:]
	}
	return os.WriteFile(filepath.Join(s.overlay, "kustomization.yaml"), []byte(Overlay(rel, name, tag, promURL)), 0o644)
}

// Overlay is a kustomization of config/default (at base, a path relative
// to it) with the manager's image and Prometheus address set.
func Overlay(base, imageName, imageTag, prometheusURL string) string {
	return fmt.Sprintf(`apiVersion: kustomize.config.k8s.io/v1beta1
kind: Kustomization
resources:
  - %s
images:
  - name: plumbline:dev
    newName: %s
    newTag: %s
patches:
  - target: {kind: Deployment, name: plumbline-manager}
    patch: |-
      - op: test
        path: /spec/template/spec/containers/0/args/4
        value: --prometheus-url=http://prometheus.monitoring.svc:9090
      - op: replace
        path: /spec/template/spec/containers/0/args/4
        value: --prometheus-url=%s
`, base, imageName, imageTag, prometheusURL)
}

func render(text string, vars map[string]string) string {
	var b bytes.Buffer
	template.Must(template.New("").Delims("[[", "]]").Parse(text)).Execute(&b, vars) //nolint:errcheck // a bytes.Buffer does not fail
	return b.String()
}

func (s *suite) timeout() string {
	return fmt.Sprintf("--timeout=%ds", int(s.o.StepTimeout.Seconds()))
}

// kubectl runs kubectl on the cluster; its output goes into the error.
func (s *suite) kubectl(args ...string) error {
	_, err := s.run(nil, args...)
	return err
}

func (s *suite) output(args ...string) (string, error) {
	return s.run(nil, args...)
}

func (s *suite) apply(manifest string) error {
	_, err := s.run(strings.NewReader(manifest), "apply", "--server-side", "-f", "-")
	return err
}

func (s *suite) run(stdin io.Reader, args ...string) (string, error) {
	cmd := exec.CommandContext(s.ctx, "kubectl", append([]string{"--kubeconfig", s.o.Kubeconfig}, args...)...)
	cmd.Stdin = stdin
	var stdout, stderr bytes.Buffer
	cmd.Stdout, cmd.Stderr = &stdout, &stderr
	if err := cmd.Run(); err != nil {
		return "", fmt.Errorf("kubectl %s: %w\n%s%s", strings.Join(args, " "), err, stdout.String(), stderr.String())
	}
	return stdout.String(), nil
}

// worldJob runs a Job of plumbline demo world to its end.
func (s *suite) worldJob(name string, args ...string) error {
	quoted, err := json.Marshal(append([]string{"demo", "world"}, append(args, "--dir=/shared")...))
	if err != nil {
		return err
	}
	vars := s.vars()
	vars["Name"], vars["Args"] = name, string(quoted)
	if err := s.apply(render(worldJobManifest, vars)); err != nil {
		return err
	}
	if err := s.kubectl("-n", namespace, "wait", "--for=condition=Complete", "job/"+name, s.timeout()); err != nil {
		return err
	}
	if args[0] == "change" {
		s.say("WORLD: %s", strings.TrimPrefix(args[len(args)-1], "--note="))
	}
	return nil
}

// waitPhase waits until the version exists, then for its phase, with
// kubectl wait.
func (s *suite) waitPhase(version string, phase v1alpha1.VersionPhase) error {
	if err := s.kubectl("-n", namespace, "wait", "--for=create", "modelversion/"+version, s.timeout()); err != nil {
		return err
	}
	return s.kubectl("-n", namespace, "wait", "--for=jsonpath={.status.phase}="+string(phase), "modelversion/"+version, s.timeout())
}

func (s *suite) line() (*v1alpha1.ModelLine, error) {
	var l v1alpha1.ModelLine
	if err := s.c.Get(s.ctx, types.NamespacedName{Namespace: namespace, Name: lineName}, &l); err != nil {
		return nil, fmt.Errorf("get line: %w", err)
	}
	return &l, nil
}

// probationEnds waits until the live version's probation is over: from
// then on the guard reports a regression and does not roll back by itself.
func (s *suite) probationEnds(version string) error {
	var l *v1alpha1.ModelLine
	// The version's phase is written before the line's status says so.
	if err := s.poll("the line to name "+version+" live", func() (bool, error) {
		var err error
		l, err = s.line()
		return err == nil && l.Status.LiveVersion == version, err
	}); err != nil {
		return err
	}
	if l.Spec.Guard == nil || l.Status.LastPromotionTime == nil {
		return nil
	}
	end := l.Spec.ProbationEnd(l.Status.LastPromotionTime.Time).Add(time.Second)
	s.say("waiting for %s's probation (%ds) to end", l.Status.LiveVersion, l.Spec.Guard.ProbationSeconds)
	return s.poll("the probation to end", func() (bool, error) { return time.Now().After(end), nil })
}

func (s *suite) poll(what string, done func() (bool, error)) error {
	deadline := time.Now().Add(s.o.StepTimeout)
	for {
		ok, err := done()
		if err != nil {
			return fmt.Errorf("waiting for %s: %w", what, err)
		}
		if ok {
			return nil
		}
		if time.Now().After(deadline) {
			return fmt.Errorf("gave up after %s waiting for %s", s.o.StepTimeout, what)
		}
		select {
		case <-s.ctx.Done():
			return fmt.Errorf("interrupted while waiting for %s", what)
		case <-time.After(500 * time.Millisecond):
		}
	}
}

// collect reads what the story left: the gate's judgements, the Jobs,
// the live version, and what Prometheus scraped from the pods.
func (s *suite) collect() error {
	l, err := s.line()
	if err != nil {
		return err
	}
	s.result.Live = l.Status.LiveVersion
	var versions v1alpha1.ModelVersionList
	if err := s.c.List(s.ctx, &versions, client.InNamespace(namespace)); err != nil {
		return fmt.Errorf("list versions: %w", err)
	}
	for _, v := range versions.Items {
		if v.Status.Gate != nil {
			s.result.Gates[v.Name] = v.Status.Gate
			s.say("gate on %s: %s (%s) on %d golden-set rows, %d criteria judged", v.Name, v.Status.Gate.Verdict, v.Status.Gate.Reason, v.Status.Gate.Rows, len(v.Status.Gate.Criteria))
		}
	}
	var jobs batchv1.JobList
	if err := s.c.List(s.ctx, &jobs, client.InNamespace(namespace), client.HasLabels{v1alpha1.RoleLabel}); err != nil {
		return fmt.Errorf("list jobs: %w", err)
	}
	for _, j := range jobs.Items {
		run := JobRun{Role: j.Labels[v1alpha1.RoleLabel], Version: j.Labels[v1alpha1.VersionLabel], Succeeded: j.Status.Succeeded > 0}
		if j.Status.StartTime != nil && j.Status.CompletionTime != nil {
			run.Took = j.Status.CompletionTime.Sub(j.Status.StartTime.Time)
		}
		s.result.Jobs[j.Name] = run
	}
	names := make([]string, 0, len(s.result.Jobs))
	for n := range s.result.Jobs {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, n := range names {
		j := s.result.Jobs[n]
		s.say("Job %s (%s): succeeded=%v in %s", n, j.Role, j.Succeeded, j.Took)
	}
	res, err := s.query(`count by (version) (last_over_time(larkspur_late_risk_roc_auc[30m]))`)
	if err != nil {
		return err
	}
	for _, r := range res {
		if v := r.Metric["version"]; v != "" && !slices.Contains(s.result.ScrapedVersions, v) {
			s.result.ScrapedVersions = append(s.result.ScrapedVersions, v)
		}
	}
	sort.Strings(s.result.ScrapedVersions)
	s.say("Prometheus scraped scorer pods serving %s", strings.Join(s.result.ScrapedVersions, ", "))
	res, err = s.query(`plumbline_line_condition_since_timestamp_seconds{namespace="` + namespace + `",line="` + lineName + `"}`)
	if err != nil {
		return err
	}
	s.result.ManagerSeries = len(res)
	s.say("Prometheus scraped %d plumbline_line_condition_since_timestamp_seconds series of the line from the manager's pod", len(res))
	return nil
}

type sample struct {
	Metric map[string]string `json:"metric"`
}

// query asks the suite's Prometheus an instant query through the API
// server's service proxy.
func (s *suite) query(q string) ([]sample, error) {
	raw, err := s.cs.CoreV1().Services("monitoring").ProxyGet("http", "prometheus", "9090", "/api/v1/query", map[string]string{"query": q}).DoRaw(s.ctx)
	if err != nil {
		return nil, fmt.Errorf("query Prometheus through the API server %q: %w", q, err)
	}
	var resp struct {
		Status string `json:"status"`
		Data   struct {
			Result []sample `json:"result"`
		} `json:"data"`
	}
	if err := json.Unmarshal(raw, &resp); err != nil || resp.Status != "success" {
		return nil, fmt.Errorf("query Prometheus %q: %v: %s", q, err, raw)
	}
	return resp.Data.Result, nil
}

// printEvents prints plumbline's events about the story's resources not
// printed yet, oldest first.
func (s *suite) printEvents() {
	var list eventsv1.EventList
	if err := s.c.List(s.ctx, &list, client.InNamespace(namespace)); err != nil {
		return
	}
	sort.SliceStable(list.Items, func(i, j int) bool { return demo.EventTime(&list.Items[i]).Before(demo.EventTime(&list.Items[j])) })
	for i := range list.Items {
		e := &list.Items[i]
		s.mu.Lock()
		seen := s.seen[e.UID]
		s.seen[e.UID] = true
		s.mu.Unlock()
		if seen {
			continue
		}
		switch e.Regarding.Kind {
		case "ModelLine", "ModelVersion":
			s.say("event %s %s %s/%s: %s", e.Type, e.Reason, e.Regarding.Kind, e.Regarding.Name, e.Note)
		case "Job":
			if e.Reason == "Completed" || e.Reason == "BackoffLimitExceeded" {
				s.say("event %s %s Job/%s", e.Type, e.Reason, e.Regarding.Name)
			}
		}
	}
}

// diagnose prints what a failed step needs: the line's status, the pods
// and the manager's log.
func (s *suite) diagnose() {
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	s.ctx = ctx
	for _, args := range [][]string{
		{"-n", namespace, "get", "modellines,modelversions,jobs,pods", "-o", "wide"},
		{"-n", namespace, "get", "modelline", lineName, "-o", "yaml"},
		{"-n", "monitoring", "get", "pods", "-o", "wide"},
		{"-n", "monitoring", "logs", "deployment/prometheus", "--tail=30"},
		{"-n", "plumbline-system", "get", "pods", "-o", "wide"},
		{"-n", "plumbline-system", "logs", "deployment/plumbline-manager", "--tail=60"},
	} {
		out, err := s.output(args...)
		if err != nil {
			out = err.Error()
		}
		s.mu.Lock()
		fmt.Fprintf(s.o.Out, "\n$ kubectl %s\n%s", strings.Join(args, " "), out)
		s.mu.Unlock()
	}
}
