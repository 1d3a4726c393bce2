// Package manager builds plumbline's controller manager: the scheme, the
// caches, the reconcilers, the metrics and health endpoints. The `manager`
// command, the demo and the API-server tests all start it through New, so
// the tests exercise the same wiring that runs in a cluster.
package manager

import (
	"context"
	"fmt"
	"net/url"
	"time"

	appsv1 "k8s.io/api/apps/v1"
	batchv1 "k8s.io/api/batch/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/labels"
	"k8s.io/apimachinery/pkg/runtime"
	"k8s.io/apimachinery/pkg/selection"
	clientgoscheme "k8s.io/client-go/kubernetes/scheme"
	"k8s.io/client-go/rest"

	ctrl "sigs.k8s.io/controller-runtime"
	"sigs.k8s.io/controller-runtime/pkg/cache"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/config"
	"sigs.k8s.io/controller-runtime/pkg/healthz"
	metricsserver "sigs.k8s.io/controller-runtime/pkg/metrics/server"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/controllers/index"
	"plumbline.dev/plumbline/controllers/modelline"
	"plumbline.dev/plumbline/controllers/modelversion"
	"plumbline.dev/plumbline/internal/engine/clock"
	"plumbline.dev/plumbline/internal/engine/promq"
)

// ControllerName is the name plumbline reports events and leases under.
const ControllerName = "plumbline-controller"

// Options configure the manager.
type Options struct {
	// MetricsAddr is where Prometheus metrics are served; "0" turns them off.
	MetricsAddr string
	// ProbeAddr is where /healthz and /readyz are served; "0" turns them off.
	ProbeAddr string
	// LeaderElect makes only one replica act at a time.
	LeaderElect bool
	// LeaderElectionNamespace holds the lease; empty means the namespace the
	// manager runs in.
	LeaderElectionNamespace string
	// PrometheusURL is the Prometheus server that triggers, checks and guards
	// query.
	PrometheusURL string
	// Namespaces limits the manager to these namespaces; empty means all.
	Namespaces []string
	// PrometheusTimeout bounds each query; zero means 10s.
	PrometheusTimeout time.Duration
	// TriggerCoverage is the share of a trigger window's points that must be
	// present for it to be judged; zero means 0.8.
	TriggerCoverage float64
	// PerLineQueries sends every line's trigger and guard queries on their
	// own, even those on a template many lines share.
	PerLineQueries bool
	// UnspreadEvaluations makes each line's evaluations due one interval
	// after its last, rather than on its own slot in the interval; for tests
	// that step a manual clock by whole intervals.
	UnspreadEvaluations bool
	// APIQPS and APIBurst bound the manager's requests to the API server
	// (a line's first judgement writes its status; a fleet's fresh start
	// writes one per line). Zero means 50 and 100.
	APIQPS   float32
	APIBurst int
	// ServingSelector, when set, is the label selector of the Deployments
	// lines serve on: the manager caches only those, not every Deployment
	// in the cluster. A line whose Deployment it does not select says
	// ServingNotFound.
	ServingSelector string
	// LineMetrics is which series are exported per line; empty means
	// modelline.LineMetricsConditions.
	LineMetrics modelline.LineMetrics
	// MaxConcurrentReconciles is how many lines are worked on at once; zero
	// means 4.
	MaxConcurrentReconciles int
	// Clock is the time source; nil means the real clock.
	Clock clock.Clock
	// AllowSecondManager lets a process build another manager after stopping
	// one (controller names must otherwise be unique per process): the demo
	// and the restart tests do.
	AllowSecondManager bool
	// WrapClient, when set, wraps the client the reconcilers read and write
	// with: the fault-injection tests refuse and time out its writes.
	WrapClient func(client.Client) client.Client
}

// Scheme returns a scheme with the built-in types and plumbline's.
func Scheme() (*runtime.Scheme, error) {
	s := runtime.NewScheme()
	if err := clientgoscheme.AddToScheme(s); err != nil {
		return nil, fmt.Errorf("add built-in types to scheme: %w", err)
	}
	if err := v1alpha1.AddToScheme(s); err != nil {
		return nil, fmt.Errorf("add plumbline types to scheme: %w", err)
	}
	return s, nil
}

// Validate checks the options a person typed.
func (o Options) Validate() error {
	if o.PrometheusURL != "" {
		u, err := url.Parse(o.PrometheusURL)
		if err != nil || (u.Scheme != "http" && u.Scheme != "https") || u.Host == "" {
			return fmt.Errorf("--prometheus-url %q: want an http(s) URL such as http://prometheus.monitoring:9090", o.PrometheusURL)
		}
	}
	if o.MaxConcurrentReconciles < 0 {
		return fmt.Errorf("--max-concurrent-reconciles %d: want a positive number", o.MaxConcurrentReconciles)
	}
	if o.TriggerCoverage < 0 || o.TriggerCoverage > 1 {
		return fmt.Errorf("--trigger-coverage %v: want a share between 0 and 1, such as 0.8", o.TriggerCoverage)
	}
	return nil
}

// New builds a manager with every plumbline reconciler registered.
func New(ctx context.Context, cfg *rest.Config, o Options) (ctrl.Manager, error) {
	if err := o.Validate(); err != nil {
		return nil, err
	}
	scheme, err := Scheme()
	if err != nil {
		return nil, err
	}
	cfg = rest.CopyConfig(cfg)
	cfg.QPS, cfg.Burst = o.apiRate()
	clk := o.Clock
	if clk == nil {
		clk = clock.Real{}
	}
	var prom promq.Querier = promq.None{}
	if o.PrometheusURL != "" {
		timeout := o.PrometheusTimeout
		if timeout == 0 {
			timeout = 10 * time.Second
		}
		c, err := promq.New(o.PrometheusURL, timeout)
		if err != nil {
			return nil, err
		}
		prom = c
	}
	cacheOpts, err := cacheOptions(o)
	if err != nil {
		return nil, err
	}
	if len(o.Namespaces) > 0 {
		cacheOpts.DefaultNamespaces = map[string]cache.Config{}
		for _, ns := range o.Namespaces {
			cacheOpts.DefaultNamespaces[ns] = cache.Config{}
		}
	}
	mgr, err := ctrl.NewManager(cfg, ctrl.Options{
		Scheme:                  scheme,
		Cache:                   cacheOpts,
		Metrics:                 metricsserver.Options{BindAddress: o.MetricsAddr},
		HealthProbeBindAddress:  o.ProbeAddr,
		LeaderElection:          o.LeaderElect,
		LeaderElectionID:        "plumbline.dev",
		LeaderElectionNamespace: o.LeaderElectionNamespace,
		// Leaving the lease at once on shutdown lets a new replica take over
		// without waiting for the lease to expire.
		LeaderElectionReleaseOnCancel: true,
		Controller:                    config.Controller{SkipNameValidation: &o.AllowSecondManager},
		NewClient:                     newClient(o.WrapClient),
	})
	if err != nil {
		return nil, fmt.Errorf("create manager: %w", err)
	}
	if err := mgr.AddHealthzCheck("healthz", healthz.Ping); err != nil {
		return nil, fmt.Errorf("add health check: %w", err)
	}
	if err := mgr.AddReadyzCheck("readyz", healthz.Ping); err != nil {
		return nil, fmt.Errorf("add ready check: %w", err)
	}

	recorder := mgr.GetEventRecorder(ControllerName)
	if err := index.Register(ctx, mgr); err != nil {
		return nil, err
	}
	history, err := historyCache(ctx, cfg, mgr, cacheOpts)
	if err != nil {
		return nil, err
	}
	lines := &modelline.Reconciler{Client: mgr.GetClient(), APIReader: mgr.GetAPIReader(), History: history, Clock: clk, Recorder: recorder,
		Prometheus: prom, Coverage: o.TriggerCoverage, PerLineQueries: o.PerLineQueries, LineMetrics: o.LineMetrics, Unspread: o.UnspreadEvaluations, ServingSelector: o.ServingSelector}
	workers := o.MaxConcurrentReconciles
	if workers <= 0 {
		workers = 4
	}
	if err := lines.SetupWithManager(mgr, workers); err != nil {
		return nil, fmt.Errorf("set up ModelLine controller: %w", err)
	}
	versions := &modelversion.Reconciler{Client: mgr.GetClient(), Clock: clk, Recorder: recorder}
	if err := versions.SetupWithManager(mgr); err != nil {
		return nil, fmt.Errorf("set up ModelVersion controller: %w", err)
	}
	return mgr, nil
}

// apiRate is the client's rate limit: the options', or 50 requests a
// second with bursts of 100 (controller-runtime's own default, 20 and 30,
// took over a minute to write a thousand lines' first statuses).
func (o Options) apiRate() (float32, int) {
	qps, burst := o.APIQPS, o.APIBurst
	if qps <= 0 {
		qps = 50
	}
	if burst <= 0 {
		burst = 2 * int(qps)
	}
	return qps, burst
}

// lastApplied is the annotation kubectl apply keeps a whole copy of the
// object in; the manager never reads it.
const lastApplied = "kubectl.kubernetes.io/last-applied-configuration"

// cacheOptions limits the manager's cache to what it reads: the Jobs it
// made (they carry the line label), the Deployments the serving selector
// picks (all when it is empty), no object's managedFields or last-applied
// copy, no history version (they are in the history cache, as metadata
// only), and no version's per-criterion gate results (status.gate.criteria,
// up to 200 entries a version, the bulk of a gated version's status: the
// manager writes them once, when it judges the version, and never reads
// them back). The manager writes by patches of the fields it changes, so
// what the cache leaves out is never written back.
func cacheOptions(o Options) (cache.Options, error) {
	ours, err := labels.NewRequirement(v1alpha1.LineLabel, selection.Exists, nil)
	if err != nil {
		return cache.Options{}, fmt.Errorf("job selector: %w", err)
	}
	current, err := historySelector(false)
	if err != nil {
		return cache.Options{}, err
	}
	byObject := map[client.Object]cache.ByObject{
		&batchv1.Job{}: {Label: labels.NewSelector().Add(*ours)},
		// History versions are in the history cache, as metadata only.
		&v1alpha1.ModelVersion{}: {Label: current},
	}
	if o.ServingSelector != "" {
		sel, err := labels.Parse(o.ServingSelector)
		if err != nil {
			return cache.Options{}, fmt.Errorf("--serving-selector %q: %w (want a label selector such as plumbline.dev/serving=true)", o.ServingSelector, err)
		}
		byObject[&appsv1.Deployment{}] = cache.ByObject{Label: sel}
	}
	strip := cache.TransformStripManagedFields()
	return cache.Options{ByObject: byObject, DefaultTransform: func(in any) (any, error) {
		out, err := strip(in)
		if err != nil {
			return out, err
		}
		if v, ok := out.(*v1alpha1.ModelVersion); ok && v.Status.Gate != nil {
			v.Status.Gate.Criteria = nil
		}
		if obj, ok := out.(metav1.Object); ok {
			if a := obj.GetAnnotations(); a[lastApplied] != "" {
				delete(a, lastApplied)
				obj.SetAnnotations(a)
			}
		}
		return out, nil
	}}, nil
}

// historyCache holds the metadata of the history versions (labelled
// v1alpha1.HistoryLabel), which the main cache leaves out: a few hundred
// bytes a version instead of its whole status, read to prune history and to
// find a version a person asks to serve again. It starts and syncs with the
// manager's own cache, before any reconciler runs.
func historyCache(ctx context.Context, cfg *rest.Config, mgr ctrl.Manager, main cache.Options) (cache.Cache, error) {
	sel, err := historySelector(true)
	if err != nil {
		return nil, err
	}
	c, err := cache.New(cfg, cache.Options{HTTPClient: mgr.GetHTTPClient(), Scheme: mgr.GetScheme(), Mapper: mgr.GetRESTMapper(),
		DefaultNamespaces: main.DefaultNamespaces, DefaultLabelSelector: sel, DefaultTransform: main.DefaultTransform})
	if err != nil {
		return nil, fmt.Errorf("create history cache: %w", err)
	}
	if err := index.RegisterHistory(ctx, c); err != nil {
		return nil, err
	}
	if err := mgr.Add(syncedWithManager{c}); err != nil {
		return nil, fmt.Errorf("add history cache: %w", err)
	}
	return c, nil
}

// syncedWithManager makes the manager start a cache with its own and wait
// for it to sync before it starts the reconcilers.
type syncedWithManager struct{ cache.Cache }

func (s syncedWithManager) GetCache() cache.Cache { return s.Cache }

// historySelector selects the history versions, or (in false) all others.
func historySelector(in bool) (labels.Selector, error) {
	op := selection.DoesNotExist
	if in {
		op = selection.Exists
	}
	req, err := labels.NewRequirement(v1alpha1.HistoryLabel, op, nil)
	if err != nil {
		return nil, fmt.Errorf("history selector: %w", err)
	}
	return labels.NewSelector().Add(*req), nil
}

// newClient is controller-runtime's client, wrapped when wrap is set.
func newClient(wrap func(client.Client) client.Client) client.NewClientFunc {
	return func(cfg *rest.Config, o client.Options) (client.Client, error) {
		c, err := client.New(cfg, o)
		if err != nil || wrap == nil {
			return c, err
		}
		return wrap(c), nil
	}
}
