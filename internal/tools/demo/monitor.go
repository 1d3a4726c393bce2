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
// it exports the address feed's missing share and the population stability
// index of the inputs of the last scored parcels against the reference the
// first model was trained on, and, once their outcomes are known (labelDelay
// after scoring: a parcel is known to be late only when it is delivered),
// the ROC AUC over the last labelled parcels and a count of them. The
// quality gauge is thus stamped when it is scored and judges the
// predictions of labelDelay before. The serving simulator of `plumbline
// demo` and the real scorer of `plumbline demo serve` both feed one.
type monitor struct {
	window     int           // parcels in the quality and input windows
	labelDelay time.Duration // from scoring a parcel to knowing its outcome

	weightCut []float64 // reference deciles of weight
	// The reference's histograms, which the PSI compares against.
	refDepots, refWeights []float64

	mu       sync.Mutex
	recent   []scored // the last labelled parcels
	inputs   []scored // the last scored parcels, labelled or not
	awaiting []awaited
	lastAUC  float64 // of the recent parcels, at the last export

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

// awaited is a scored parcel whose outcome is not known yet.
type awaited struct {
	known time.Time
	s     scored
}

// referenceOf is the batch the monitoring compares the inputs against: the
// parcels of the world's first minute, as the imported model saw them.
func referenceOf(w *World) []Parcel {
	at := w.Phases[0].At
	return w.Sample(at, at.Add(time.Minute), 5000, 1)
}

// newMonitor makes the monitoring of a scorer; what says who exports it,
// for the metrics' help.
func newMonitor(reference []Parcel, window int, labelDelay time.Duration, what string) *monitor {
	m := &monitor{window: window, labelDelay: labelDelay, lastAUC: math.NaN(), registry: prometheus.NewRegistry()}
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

// add records a batch of scored parcels, takes in the outcomes that have
// come in by now, and updates the gauges.
func (m *monitor) add(batch []scored) {
	m.addAt(batch, time.Now())
}

func (m *monitor) addAt(batch []scored, now time.Time) {
	m.mu.Lock()
	defer m.mu.Unlock()
	m.inputs = keepLast(append(m.inputs, batch...), m.window)
	for _, b := range batch {
		m.awaiting = append(m.awaiting, awaited{known: now.Add(m.labelDelay), s: b})
	}
	in := 0
	for in < len(m.awaiting) && !m.awaiting[in].known.After(now) {
		m.recent = append(m.recent, m.awaiting[in].s)
		in++
	}
	m.awaiting = append(m.awaiting[:0], m.awaiting[in:]...)
	m.labelled.Add(float64(in))
	m.recent = keepLast(m.recent, m.window)
	m.export()
}

// keepLast keeps the last n of s, in place.
func keepLast(s []scored, n int) []scored {
	if over := len(s) - n; over > 0 {
		return append(s[:0], s[over:]...)
	}
	return s
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

// export sets the gauges: quality from the labelled parcels, the inputs'
// from the scored ones; m.mu is held.
func (m *monitor) export() {
	if len(m.recent) > 0 {
		label := make([]uint8, len(m.recent))
		score := make([]float64, len(m.recent))
		for i, r := range m.recent {
			score[i] = r.score
			if r.late {
				label[i] = 1
			}
		}
		if v := stats.ROCAUC(label, score, stats.Order(score), nil); v.Defined() {
			m.lastAUC = v.V
			m.auc.Set(v.V)
		}
	}
	if len(m.inputs) == 0 {
		return
	}
	batch := make([]Parcel, len(m.inputs))
	missing := 0
	for i, r := range m.inputs {
		if r.missing {
			missing++
		}
		batch[i] = Parcel{Depot: r.depot, Weight: r.weight}
	}
	m.missing.Set(float64(missing) / float64(len(m.inputs)))
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
