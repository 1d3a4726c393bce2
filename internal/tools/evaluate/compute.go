package evaluate

import (
	"fmt"
	"math"
	"runtime"
	"sort"
	"sync"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/tools/stats"
)

// Settings are how the evaluation judges.
type Settings struct {
	// Threshold turns a binary score into a class: score >= threshold.
	Threshold float64
	// Confidence of the intervals.
	Confidence float64
	// MaxRegression is the largest loss against the baseline judged
	// non-inferior.
	MaxRegression float64
	Bootstrap     stats.Bootstrap
}

// metricNames lists each task's metrics in report order.
var metricNames = map[string][]string{
	Binary:     {"accuracy", "balanced_accuracy", "precision", "recall", "f1", "mcc", "roc_auc", "average_precision", "log_loss", "brier"},
	Multiclass: {"accuracy", "balanced_accuracy", "precision", "recall", "f1_macro", "f1_micro", "f1_weighted", "mcc"},
	Regression: {"mae", "rmse", "mape", "r2"},
}

// group is the rows of the whole set or of one segment, copied out.
type group struct {
	segment string
	task    string
	n       int
	label   []uint8
	cand    []float64
	base    []float64
	// predictions at the threshold (binary)
	candPred, basePred []uint8
	// score orders (binary)
	candOrder, baseOrder []int32
	candProb, baseProb   bool
	// multiclass
	// per-row log loss and squared error of the probabilities (binary),
	// worked out once so a bootstrap resample only weighs them
	candLL, baseLL, candSq, baseSq []float64
	k                              int
	lc, cc, bc                     []int32
	y                              []float64
	candRight, baseRight           []bool
}

// subset copies the given rows of a dataset into a group.
func subset(ds *Dataset, segment string, rows []int32, s Settings) *group {
	g := &group{segment: segment, task: ds.Task, n: len(rows), candProb: ds.CandProb, baseProb: ds.BaseProb, k: len(ds.Classes)}
	g.candRight, g.baseRight = make([]bool, len(rows)), make([]bool, len(rows))
	switch ds.Task {
	case Binary:
		g.label, g.cand, g.base = make([]uint8, len(rows)), make([]float64, len(rows)), make([]float64, len(rows))
		g.candPred, g.basePred = make([]uint8, len(rows)), make([]uint8, len(rows))
		for i, r := range rows {
			g.label[i], g.cand[i], g.base[i] = ds.Label[r], ds.Cand[r], ds.Base[r]
			if g.cand[i] >= s.Threshold {
				g.candPred[i] = 1
			}
			if g.base[i] >= s.Threshold {
				g.basePred[i] = 1
			}
			g.candRight[i] = g.candPred[i] == g.label[i]
			g.baseRight[i] = g.basePred[i] == g.label[i]
		}
		g.candOrder, g.baseOrder = stats.Order(g.cand), stats.Order(g.base)
		g.candLL, g.candSq = rowLosses(g.label, g.cand)
		g.baseLL, g.baseSq = rowLosses(g.label, g.base)
	case Multiclass:
		g.lc, g.cc, g.bc = make([]int32, len(rows)), make([]int32, len(rows)), make([]int32, len(rows))
		for i, r := range rows {
			g.lc[i], g.cc[i], g.bc[i] = ds.LabelClass[r], ds.CandClass[r], ds.BaseClass[r]
			g.candRight[i] = g.cc[i] == g.lc[i]
			g.baseRight[i] = g.bc[i] == g.lc[i]
		}
	case Regression:
		g.y, g.cand, g.base = make([]float64, len(rows)), make([]float64, len(rows)), make([]float64, len(rows))
		for i, r := range rows {
			g.y[i], g.cand[i], g.base[i] = ds.Y[r], ds.Cand[r], ds.Base[r]
		}
	}
	return g
}

// rowLosses works out each row's log loss and squared error, as
// stats.LogLoss and stats.Brier define them.
func rowLosses(label []uint8, p []float64) (ll, sq []float64) {
	ll, sq = make([]float64, len(p)), make([]float64, len(p))
	one := []float64{1}
	for i := range p {
		ll[i] = stats.LogLoss(label[i:i+1], p[i:i+1], one).V
		d := p[i] - float64(label[i])
		sq[i] = d * d
	}
	return ll, sq
}

// metrics computes every metric of the task for one model on weighted rows
// (w nil: each row once), in metricNames order.
func (g *group) metrics(candidate bool, w []float64) []stats.Value {
	switch g.task {
	case Binary:
		score, pred, order, prob, ll, sq := g.base, g.basePred, g.baseOrder, g.baseProb, g.baseLL, g.baseSq
		if candidate {
			score, pred, order, prob, ll, sq = g.cand, g.candPred, g.candOrder, g.candProb, g.candLL, g.candSq
		}
		c := stats.BinaryConfusion(g.label, pred, w)
		out := []stats.Value{c.Accuracy(), c.BalancedAccuracy(), c.Precision(), c.Recall(), c.F1(), c.MCC(),
			stats.ROCAUC(g.label, score, order, w), stats.AveragePrecision(g.label, score, order, w)}
		if prob {
			out = append(out, stats.WeightedMean(ll, w), stats.WeightedMean(sq, w))
		} else {
			why := stats.Value{V: math.NaN(), Undefined: "the scores are not probabilities (some lie outside [0, 1])"}
			out = append(out, why, why)
		}
		return out
	case Multiclass:
		pred := g.bc
		if candidate {
			pred = g.cc
		}
		m := stats.MulticlassConfusion(g.k, g.lc, pred, w)
		p, r, f := m.PerClass()
		return []stats.Value{m.Accuracy(), m.BalancedAccuracy(), m.Macro(p), m.Macro(r), m.Macro(f), m.MicroF1(), m.Weighted(f), m.MCC()}
	default:
		pred := g.base
		if candidate {
			pred = g.cand
		}
		return []stats.Value{stats.MAE(g.y, pred, w), stats.RMSE(g.y, pred, w), stats.MAPE(g.y, pred, w), stats.R2(g.y, pred, w)}
	}
}

// proportion gives, for a metric that is a plain proportion, its count and
// total, for a Wilson interval.
func (g *group) proportion(metric string, candidate bool) (x, n float64, ok bool) {
	right := g.baseRight
	pred := g.basePred
	if candidate {
		right, pred = g.candRight, g.candPred
	}
	switch {
	case metric == "accuracy" && g.task != Regression:
		for _, r := range right {
			if r {
				x++
			}
		}
		return x, float64(g.n), true
	case g.task == Binary && (metric == "precision" || metric == "recall"):
		for i := range g.label {
			tp := g.label[i] == 1 && pred[i] == 1
			if tp {
				x++
			}
			if metric == "precision" && pred[i] == 1 || metric == "recall" && g.label[i] == 1 {
				n++
			}
		}
		return x, n, n > 0
	}
	return 0, 0, false
}

// Result is one metric on one group.
type Result struct {
	Metric    string
	Cand      stats.Value
	Base      stats.Value
	Delta     float64
	Low, High float64
	P         float64
	PAdjusted float64
	Test      string
	N         int
	CandCI    *[2]float64
	BaseCI    *[2]float64
	McNemar   *stats.McNemar
	DeLong    *stats.DeLong
	Boot      *BootResult
}

// BootResult is the paired bootstrap of one metric's difference.
type BootResult struct {
	Low, High, P float64
	Resamples    int
	Rows         int
	Defined      bool
	// Undefined says why there is no interval (too few rows).
	Undefined string
}

// MinBootstrapRows is the fewest rows of a group the paired bootstrap gives
// an interval and a p-value for: resamples of fewer rows say next to
// nothing about the spread, and a zero-width interval from one row would
// pass a non-inferiority criterion on nothing (common practice; there is
// no single published bound).
const MinBootstrapRows = 10

// GroupResult is every metric on one group.
type GroupResult struct {
	Segment string
	Rows    int
	Results []Result
}

// evaluate computes one group: the metrics on all its rows, the paired
// tests, and the bootstrap of every difference.
func evaluate(g *group, s Settings, seed uint64) GroupResult {
	names := metricNames[g.task]
	cand, base := g.metrics(true, nil), g.metrics(false, nil)
	res := GroupResult{Segment: g.segment, Rows: g.n, Results: make([]Result, len(names))}
	for i, name := range names {
		r := Result{Metric: name, Cand: cand[i], Base: base[i], N: g.n, Test: "bootstrap",
			Delta: math.NaN(), Low: math.NaN(), High: math.NaN(), P: math.NaN(), PAdjusted: math.NaN()}
		if cand[i].Defined() && base[i].Defined() {
			r.Delta = cand[i].V - base[i].V
		}
		for _, side := range []bool{true, false} {
			if x, n, ok := g.proportion(name, side); ok {
				lo, hi := stats.Wilson(x, n, s.Confidence)
				ci := &[2]float64{lo, hi}
				if side {
					r.CandCI = ci
				} else {
					r.BaseCI = ci
				}
			}
		}
		res.Results[i] = r
	}

	// The paired bootstrap, every metric on the same resamples.
	if g.n < MinBootstrapRows {
		why := fmt.Sprintf("%d rows: a paired bootstrap interval needs at least %d", g.n, MinBootstrapRows)
		for i := range res.Results {
			res.Results[i].Boot = &BootResult{Resamples: s.Bootstrap.Resamples, Rows: g.n, Low: math.NaN(), High: math.NaN(), P: math.NaN(), Undefined: why}
		}
		tests(g, s, res.Results)
		return res
	}
	rows := s.Bootstrap.Rows(g.n)
	sub := g
	if len(rows) < g.n {
		sub = subset(g.asDataset(), g.segment, rows, s)
	}
	centreC, centreB := sub.metrics(true, nil), sub.metrics(false, nil)
	stat := func(w []float64, out []float64) {
		c, b := sub.metrics(true, w), sub.metrics(false, w)
		for i := range out {
			if c[i].Defined() && b[i].Defined() {
				out[i] = c[i].V - b[i].V
			}
		}
	}
	if g.task == Binary {
		stat = newBinKernel(sub).run
	}
	draws := s.Bootstrap.Run(sub.n, len(names), seed, stat)
	for i := range res.Results {
		r := &res.Results[i]
		br := &BootResult{Resamples: s.Bootstrap.Resamples, Rows: sub.n, Low: math.NaN(), High: math.NaN(), P: math.NaN()}
		if !math.IsNaN(r.Delta) && centreC[i].Defined() && centreB[i].Defined() {
			br.Low, br.High, br.P, br.Defined = stats.Interval(draws[i], r.Delta, centreC[i].V-centreB[i].V, sub.n, g.n, s.Confidence)
		}
		r.Boot = br
		r.Low, r.High, r.P = br.Low, br.High, br.P
	}
	tests(g, s, res.Results)
	return res
}

// tests runs the paired tests of their own: McNemar for accuracy, DeLong
// for ROC AUC.
func tests(g *group, s Settings, results []Result) {
	for i := range results {
		r := &results[i]
		switch {
		case r.Metric == "accuracy":
			var b, c int64
			for j := range g.candRight {
				switch {
				case g.candRight[j] && !g.baseRight[j]:
					b++
				case !g.candRight[j] && g.baseRight[j]:
					c++
				}
			}
			m := stats.McNemarTest(b, c)
			r.McNemar = &m
			r.P, r.Test = m.PValue, "mcnemar"
		case r.Metric == "roc_auc" && g.task == Binary:
			if d, ok := stats.DeLongTestSorted(g.label, g.cand, g.base, g.candOrder, g.baseOrder, s.Confidence); ok {
				r.DeLong = &d
				r.P, r.Low, r.High, r.Test = d.PValue, d.Low, d.High, "delong"
			}
		}
	}
}

// asDataset views a group as a dataset, to subset it again.
func (g *group) asDataset() *Dataset {
	ds := &Dataset{Task: g.task, N: g.n, Label: g.label, Cand: g.cand, Base: g.base, CandProb: g.candProb, BaseProb: g.baseProb,
		LabelClass: g.lc, CandClass: g.cc, BaseClass: g.bc, Y: g.y}
	ds.Classes = make([]string, g.k)
	return ds
}

// Evaluate computes the whole set and every segment, in parallel, then
// corrects each metric's p-values across segments with Holm's method.
func Evaluate(ds *Dataset, s Settings) []GroupResult {
	type job struct {
		name string
		rows []int32
	}
	all := make([]int32, ds.N)
	for i := range all {
		all[i] = int32(i)
	}
	jobs := []job{{"", all}}
	if ds.Segment != nil {
		bySeg := make([][]int32, len(ds.Segments))
		for i, k := range ds.Segment {
			bySeg[k] = append(bySeg[k], int32(i))
		}
		order := make([]int, len(ds.Segments))
		for i := range order {
			order[i] = i
		}
		sort.Slice(order, func(a, b int) bool { return ds.Segments[order[a]] < ds.Segments[order[b]] })
		for _, k := range order {
			jobs = append(jobs, job{ds.Segments[k], bySeg[k]})
		}
	}
	out := make([]GroupResult, len(jobs))
	var wg sync.WaitGroup
	sem := make(chan struct{}, runtime.GOMAXPROCS(0))
	for i, j := range jobs {
		wg.Add(1)
		go func() {
			defer wg.Done()
			sem <- struct{}{}
			defer func() { <-sem }()
			out[i] = evaluate(subset(ds, j.name, j.rows, s), s, uint64(i+1))
		}()
	}
	wg.Wait()
	adjustAcrossSegments(out)
	return out
}

// adjustAcrossSegments applies Holm's correction, per metric, to the
// p-values of the segments (the whole set is its own test).
func adjustAcrossSegments(groups []GroupResult) {
	if len(groups) < 2 {
		for i := range groups {
			for j := range groups[i].Results {
				groups[i].Results[j].PAdjusted = groups[i].Results[j].P
			}
		}
		return
	}
	for i := range groups[0].Results {
		groups[0].Results[i].PAdjusted = groups[0].Results[i].P
	}
	segs := groups[1:]
	for m := range segs[0].Results {
		var ps []float64
		var where []int
		for gi := range segs {
			if p := segs[gi].Results[m].P; !math.IsNaN(p) {
				ps = append(ps, p)
				where = append(where, gi)
			}
		}
		adj := stats.Holm(ps)
		for k, gi := range where {
			segs[gi].Results[m].PAdjusted = adj[k]
		}
	}
}

// NonInferior says whether a difference's interval keeps within
// maxRegression of the baseline on the side that means worse.
func NonInferior(metric string, low, high, maxRegression float64) (bool, bool) {
	if math.IsNaN(low) || math.IsNaN(high) {
		return false, false
	}
	dir, _ := v1alpha1.KnownBetter(metric)
	if dir == v1alpha1.LowerBetter {
		return high <= maxRegression, true
	}
	return low >= -maxRegression, true
}

// MustPassFailures lists the must-pass rows the candidate got wrong.
func MustPassFailures(ds *Dataset, s Settings) []string {
	var failed []string
	for k, r := range ds.MustPass {
		var right bool
		switch ds.Task {
		case Binary:
			pred := uint8(0)
			if ds.Cand[r] >= s.Threshold {
				pred = 1
			}
			right = pred == ds.Label[r]
		case Multiclass:
			right = ds.CandClass[r] == ds.LabelClass[r]
		}
		if !right {
			failed = append(failed, ds.MustPassID[k])
		}
	}
	return failed
}
