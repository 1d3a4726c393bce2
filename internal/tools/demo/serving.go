package demo

import (
	"context"
	"fmt"
	"maps"
	"math"
	"math/rand/v2"
	"net"
	"net/http"
	"slices"
	"sort"
	"sync"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promhttp"
	appsv1 "k8s.io/api/apps/v1"
	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/types"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/tools/stats"
)

// servingSim exists for the demo only. It plays Larkspur's scorer pods and
// their monitoring: each tick it draws the parcels of the moment from the
// world, has each scored by one of the scorer Deployment's Ready pods with
// the model that pod serves (its MODEL_URI), learns at once whether each
// was late (in the story, labels arrive days later), and exports what
// Larkspur's own monitoring would: the ROC AUC over the last parcels, the
// address feed's missing share, and the population stability index of the
// inputs against the data the first model was trained on. A real
// Prometheus scrapes it. In a cluster, the scorer serves real traffic and
// the team's monitoring feeds Prometheus; none of this exists there.
type servingSim struct {
	c          client.Client
	ns         string
	deployment string
	container  string
	artifact   string // the env var that holds the artifact URI
	world      func() Phase
	rate       float64 // parcels per second
	window     int     // parcels in the quality window

	rng       *rand.Rand
	weightCut []float64 // reference deciles of weight
	// The reference's histograms, which the PSI compares against.
	refDepots, refWeights []float64

	mu      sync.Mutex
	recent  []scored
	lastAUC float64 // of the recent parcels, at the last tick
	models  map[string]*Model
	served  map[string]int // parcels per version since the start

	auc, missing prometheus.Gauge
	psi          *prometheus.GaugeVec
	labelled     prometheus.Counter
	scoredBy     *prometheus.CounterVec
	registry     *prometheus.Registry
}

type scored struct {
	score   float64
	late    bool
	missing bool
	depot   string
	weight  float64
}

func newServingSim(c client.Client, ns string, world func() Phase, reference []Parcel, seed uint64) *servingSim {
	s := &servingSim{c: c, ns: ns, deployment: scorer, container: "scorer", artifact: "MODEL_URI", world: world,
		rate: 300, window: 2000, rng: rand.New(rand.NewPCG(seed, 3)), lastAUC: math.NaN(),
		models: map[string]*Model{}, served: map[string]int{}, registry: prometheus.NewRegistry()}
	w := make([]float64, len(reference))
	for i, p := range reference {
		w[i] = p.Weight
	}
	sort.Float64s(w)
	for q := 1; q < 10; q++ {
		s.weightCut = append(s.weightCut, w[q*len(w)/10])
	}
	s.refDepots, s.refWeights = s.histograms(reference)
	s.auc = prometheus.NewGauge(prometheus.GaugeOpts{Name: "larkspur_late_risk_roc_auc",
		Help: "ROC AUC of the served late-delivery scores over the last labelled parcels (demo simulator)."})
	s.missing = prometheus.NewGauge(prometheus.GaugeOpts{Name: "larkspur_feature_missing_ratio",
		Help: "Share of recent parcels whose address confidence is missing (demo simulator).", ConstLabels: prometheus.Labels{"feature": "address_confidence"}})
	s.psi = prometheus.NewGaugeVec(prometheus.GaugeOpts{Name: "larkspur_feature_psi",
		Help: "Population stability index of a feature, recent parcels against the reference (demo simulator)."}, []string{"feature"})
	s.labelled = prometheus.NewCounter(prometheus.CounterOpts{Name: "larkspur_labelled_deliveries_total",
		Help: "Parcels whose outcome is known (demo simulator)."})
	s.scoredBy = prometheus.NewCounterVec(prometheus.CounterOpts{Name: "larkspur_scored_parcels_total",
		Help: "Parcels scored, by the model version the pod served (demo simulator)."}, []string{"version"})
	s.registry.MustRegister(s.auc, s.missing, s.psi, s.labelled, s.scoredBy)
	return s
}

// serve exposes the metrics on a free loopback port and returns its address.
func (s *servingSim) serve(ctx context.Context) (string, error) {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return "", fmt.Errorf("listen for the serving simulator: %w", err)
	}
	srv := &http.Server{Handler: promhttp.HandlerFor(s.registry, promhttp.HandlerOpts{}), ReadHeaderTimeout: 5 * time.Second}
	go func() { _ = srv.Serve(l) }()
	go func() {
		<-ctx.Done()
		_ = srv.Close()
	}()
	return l.Addr().String(), nil
}

// run scores traffic every tick until ctx ends.
func (s *servingSim) run(ctx context.Context) {
	const tick = 200 * time.Millisecond
	for {
		// A tick that cannot list the scorer's pods serves nothing; the
		// gauges keep their last values, as a real exporter's would, and
		// the next tick tries again.
		_ = s.tick(ctx, int(s.rate*tick.Seconds()))
		select {
		case <-ctx.Done():
			return
		case <-time.After(tick):
		}
	}
}

// pod is a Ready scorer pod and what it serves.
type pod struct {
	version string
	model   *Model
}

func (s *servingSim) readyPods(ctx context.Context) ([]pod, error) {
	var dep appsv1.Deployment
	if err := s.c.Get(ctx, types.NamespacedName{Namespace: s.ns, Name: s.deployment}, &dep); err != nil {
		return nil, client.IgnoreNotFound(err)
	}
	sel, err := metav1.LabelSelectorAsSelector(dep.Spec.Selector)
	if err != nil {
		return nil, err
	}
	var pods corev1.PodList
	if err := s.c.List(ctx, &pods, client.InNamespace(s.ns), client.MatchingLabelsSelector{Selector: sel}); err != nil {
		return nil, err
	}
	var out []pod
	for _, p := range pods.Items {
		if p.DeletionTimestamp != nil || !podReady(&p) {
			continue
		}
		for _, c := range p.Spec.Containers {
			if c.Name != s.container {
				continue
			}
			for _, e := range c.Env {
				if e.Name != s.artifact {
					continue
				}
				m, err := s.model(e.Value)
				if err != nil {
					continue // a pod that cannot load its model serves nothing
				}
				out = append(out, pod{version: p.Annotations[v1alpha1.VersionAnnotation], model: m})
			}
		}
	}
	return out, nil
}

func podReady(p *corev1.Pod) bool {
	for _, c := range p.Status.Conditions {
		if c.Type == corev1.PodReady {
			return c.Status == corev1.ConditionTrue
		}
	}
	return false
}

func (s *servingSim) model(uri string) (*Model, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if m, ok := s.models[uri]; ok {
		return m, nil
	}
	m, err := ReadArtifact(uri)
	if err != nil {
		return nil, err
	}
	s.models[uri] = m
	return m, nil
}

func (s *servingSim) tick(ctx context.Context, n int) error {
	pods, err := s.readyPods(ctx)
	if err != nil || len(pods) == 0 {
		return err
	}
	phase := s.world()
	s.mu.Lock()
	defer s.mu.Unlock()
	for i := 0; i < n; i++ {
		p := phase.Draw(s.rng, "")
		by := pods[s.rng.IntN(len(pods))]
		s.recent = append(s.recent, scored{score: by.model.Score(p), late: p.Late, missing: math.IsNaN(p.Address), depot: p.Depot, weight: p.Weight})
		s.served[by.version]++
		s.scoredBy.WithLabelValues(by.version).Inc()
	}
	s.labelled.Add(float64(n))
	if over := len(s.recent) - s.window; over > 0 {
		s.recent = append(s.recent[:0], s.recent[over:]...)
	}
	s.export()
	return nil
}

// histograms bins parcels by depot (in allDepots' order) and by the
// reference's weight deciles.
func (s *servingSim) histograms(ps []Parcel) (depots, weights []float64) {
	depots = make([]float64, len(allDepots))
	weights = make([]float64, len(s.weightCut)+1)
	for _, p := range ps {
		if i := slices.Index(allDepots, p.Depot); i >= 0 {
			depots[i]++
		}
		weights[sort.SearchFloat64s(s.weightCut, p.Weight)]++
	}
	return depots, weights
}

// export sets the gauges from the recent parcels.
func (s *servingSim) export() {
	label := make([]uint8, len(s.recent))
	score := make([]float64, len(s.recent))
	batch := make([]Parcel, len(s.recent))
	missing := 0
	for i, r := range s.recent {
		score[i] = r.score
		if r.late {
			label[i] = 1
		}
		if r.missing {
			missing++
		}
		batch[i] = Parcel{Depot: r.depot, Weight: r.weight}
	}
	if v := stats.ROCAUC(label, score, stats.Order(score), nil); v.Defined() {
		s.lastAUC = v.V
		s.auc.Set(v.V)
	}
	s.missing.Set(float64(missing) / float64(len(s.recent)))
	depots, weights := s.histograms(batch)
	s.psi.WithLabelValues("depot").Set(stats.PSI(s.refDepots, depots))
	s.psi.WithLabelValues("weight_kg").Set(stats.PSI(s.refWeights, weights))
}

// servedBy is how many parcels each version has scored.
func (s *servingSim) servedBy() map[string]int {
	s.mu.Lock()
	defer s.mu.Unlock()
	return maps.Clone(s.served)
}

// currentAUC is the quality over the last parcels, for the timeline.
func (s *servingSim) currentAUC() float64 {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.lastAUC
}
