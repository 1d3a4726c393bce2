package demo

import (
	"context"
	"fmt"
	"maps"
	"math"
	"math/rand/v2"
	"net"
	"net/http"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promhttp"
	appsv1 "k8s.io/api/apps/v1"
	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/types"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/api/v1alpha1"
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
	*monitor
	c          client.Client
	ns         string
	deployment string
	container  string
	artifact   string // the env var that holds the artifact URI
	world      func() Phase
	rate       float64 // parcels per second

	rng *rand.Rand

	models   map[string]*Model // guarded by monitor.mu
	served   map[string]int    // parcels per version since the start; guarded by monitor.mu
	scoredBy *prometheus.CounterVec
}

// labelDelay is how long after scoring a parcel its outcome is known in the
// demo's story: hours, compressed like the rest (spec.labels.delaySeconds of
// the demo's line).
const labelDelay = 10 * time.Second

func newServingSim(c client.Client, ns string, world func() Phase, reference []Parcel, seed uint64) *servingSim {
	s := &servingSim{monitor: newMonitor(reference, 2000, labelDelay, "demo simulator"), c: c, ns: ns, deployment: scorer, container: "scorer",
		artifact: "MODEL_URI", world: world, rate: 300, rng: rand.New(rand.NewPCG(seed, 3)),
		models: map[string]*Model{}, served: map[string]int{}}
	s.scoredBy = prometheus.NewCounterVec(prometheus.CounterOpts{Name: "larkspur_scored_parcels_total",
		Help: "Parcels scored, by the model version the pod served (demo simulator)."}, []string{"version"})
	s.registry.MustRegister(s.scoredBy)
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
	batch := make([]scored, n)
	by := make([]string, n)
	for i := range batch {
		p := phase.Draw(s.rng, "")
		pod := pods[s.rng.IntN(len(pods))]
		batch[i] = scored{score: pod.model.Score(p), late: p.Late, missing: math.IsNaN(p.Address), depot: p.Depot, weight: p.Weight}
		by[i] = pod.version
	}
	s.mu.Lock()
	for _, v := range by {
		s.served[v]++
		s.scoredBy.WithLabelValues(v).Inc()
	}
	s.mu.Unlock()
	s.add(batch)
	return nil
}

// servedBy is how many parcels each version has scored.
func (s *servingSim) servedBy() map[string]int {
	s.mu.Lock()
	defer s.mu.Unlock()
	return maps.Clone(s.served)
}
