package demo

import (
	"math"
	"slices"
	"sort"
	"sync"
	"time"

	"github.com/prometheus/client_golang/prometheus"

	"plumbline.dev/plumbline/internal/tools/stats"
)

// monitor is Larkspur's own monitoring of its scorer, as the demo plays it:
// it keeps the last scored parcels (in the story their labels are known at
// once; in life they arrive days later) and exports the ROC AUC over them,
// the address feed's missing share, the population stability index of the
// inputs against the reference the first model was trained on, and a count
// of labelled parcels. The serving simulator of `plumbline demo` and the
// real scorer of `plumbline demo serve` both feed one.
type monitor struct {
	window int // parcels in the quality window

	weightCut []float64 // reference deciles of weight
	// The reference's histograms, which the PSI compares against.
	refDepots, refWeights []float64

	mu      sync.Mutex
	recent  []scored
	lastAUC float64 // of the recent parcels, at the last export

	auc, missing prometheus.Gauge
	psi          *prometheus.GaugeVec
	labelled     prometheus.Counter
	registry     *prometheus.Registry
}

type scored struct {
	score   float64
	late    bool
	missing bool
	depot   string
	weight  float64
}

// referenceOf is the batch the monitoring compares the inputs against: the
// parcels of the world's first minute, as the imported model saw them.
func referenceOf(w *World) []Parcel {
	at := w.Phases[0].At
	return w.Sample(at, at.Add(time.Minute), 5000, 1)
}

// newMonitor makes the monitoring of a scorer; what says who exports it,
// for the metrics' help.
func newMonitor(reference []Parcel, window int, what string) *monitor {
	m := &monitor{window: window, lastAUC: math.NaN(), registry: prometheus.NewRegistry()}
	w := make([]float64, len(reference))
	for i, p := range reference {
		w[i] = p.Weight
	}
	sort.Float64s(w)
	for q := 1; q < 10; q++ {
		m.weightCut = append(m.weightCut, w[q*len(w)/10])
	}
	m.refDepots, m.refWeights = m.histograms(reference)
	m.auc = prometheus.NewGauge(prometheus.GaugeOpts{Name: "larkspur_late_risk_roc_auc",
		Help: "ROC AUC of the served late-delivery scores over the last labelled parcels (" + what + ")."})
	m.missing = prometheus.NewGauge(prometheus.GaugeOpts{Name: "larkspur_feature_missing_ratio",
		Help: "Share of recent parcels whose address confidence is missing (" + what + ").", ConstLabels: prometheus.Labels{"feature": "address_confidence"}})
	m.psi = prometheus.NewGaugeVec(prometheus.GaugeOpts{Name: "larkspur_feature_psi",
		Help: "Population stability index of a feature, recent parcels against the reference (" + what + ")."}, []string{"feature"})
	m.labelled = prometheus.NewCounter(prometheus.CounterOpts{Name: "larkspur_labelled_deliveries_total",
		Help: "Parcels whose outcome is known (" + what + ")."})
	m.registry.MustRegister(m.auc, m.missing, m.psi, m.labelled)
	return m
}

// add records a batch of scored parcels and updates the gauges.
func (m *monitor) add(batch []scored) {
	m.mu.Lock()
	defer m.mu.Unlock()
	m.recent = append(m.recent, batch...)
	m.labelled.Add(float64(len(batch)))
	if over := len(m.recent) - m.window; over > 0 {
		m.recent = append(m.recent[:0], m.recent[over:]...)
	}
	m.export()
}

// histograms bins parcels by depot (in allDepots' order) and by the
// reference's weight deciles.
func (m *monitor) histograms(ps []Parcel) (depots, weights []float64) {
	depots = make([]float64, len(allDepots))
	weights = make([]float64, len(m.weightCut)+1)
	for _, p := range ps {
		if i := slices.Index(allDepots, p.Depot); i >= 0 {
			depots[i]++
		}
		weights[sort.SearchFloat64s(m.weightCut, p.Weight)]++
	}
	return depots, weights
}

// export sets the gauges from the recent parcels; m.mu is held.
func (m *monitor) export() {
	if len(m.recent) == 0 {
		return
	}
	label := make([]uint8, len(m.recent))
	score := make([]float64, len(m.recent))
	batch := make([]Parcel, len(m.recent))
	missing := 0
	for i, r := range m.recent {
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
		m.lastAUC = v.V
		m.auc.Set(v.V)
	}
	m.missing.Set(float64(missing) / float64(len(m.recent)))
	depots, weights := m.histograms(batch)
	m.psi.WithLabelValues("depot").Set(stats.PSI(m.refDepots, depots))
	m.psi.WithLabelValues("weight_kg").Set(stats.PSI(m.refWeights, weights))
}

// currentAUC is the quality over the last parcels.
func (m *monitor) currentAUC() float64 {
	m.mu.Lock()
	defer m.mu.Unlock()
	return m.lastAUC
}
