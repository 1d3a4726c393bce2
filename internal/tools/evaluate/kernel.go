package evaluate

import (
	"math"

	"plumbline.dev/plumbline/internal/tools/stats"
)

// binKernel computes, for one bootstrap resample of a binary group, every
// metric of both models in three passes over the rows (one for the
// confusion matrices and mean losses of both, one per model for ROC AUC and
// average precision in score order), where the stats package's functions
// would take ten. It must give exactly what they give; a test holds it to
// that.
type binKernel struct {
	g *group
	// per model, in ascending score order: the row, its label, and the
	// index of its tie group's first position
	rows  [2][]int32
	label [2][]uint8
	first [2][]int32
}

func newBinKernel(g *group) *binKernel {
	k := &binKernel{g: g}
	for side, order := range [][]int32{g.candOrder, g.baseOrder} {
		score := g.cand
		if side == 1 {
			score = g.base
		}
		n := len(order)
		k.rows[side] = order
		k.label[side] = make([]uint8, n)
		k.first[side] = make([]int32, n)
		for j, r := range order {
			k.label[side][j] = g.label[r]
			if j > 0 && score[order[j-1]] == score[r] {
				k.first[side][j] = k.first[side][j-1]
			} else {
				k.first[side][j] = int32(j)
			}
		}
	}
	return k
}

// run fills out with candidate-minus-baseline differences, in metricNames
// order, for the weights w.
func (k *binKernel) run(w []float64, out []float64) {
	g := k.g
	var c [2]stats.Binary
	var ll, sq [2]float64
	var n, pos float64
	for i := range g.label {
		wi := w[i]
		if wi == 0 {
			continue
		}
		n += wi
		l := g.label[i]
		if l == 1 {
			pos += wi
		}
		for side, pred := range [2]uint8{g.candPred[i], g.basePred[i]} {
			switch {
			case l == 1 && pred == 1:
				c[side].TP += wi
			case l == 0 && pred == 1:
				c[side].FP += wi
			case l == 0:
				c[side].TN += wi
			default:
				c[side].FN += wi
			}
		}
		ll[0] += wi * g.candLL[i]
		ll[1] += wi * g.baseLL[i]
		sq[0] += wi * g.candSq[i]
		sq[1] += wi * g.baseSq[i]
	}
	var v [2][10]stats.Value
	for side := 0; side < 2; side++ {
		cs := c[side]
		auc, ap := k.ranking(side, w, pos, n-pos)
		v[side] = [10]stats.Value{cs.Accuracy(), cs.BalancedAccuracy(), cs.Precision(), cs.Recall(), cs.F1(), cs.MCC(), auc, ap,
			{V: math.NaN(), Undefined: "x"}, {V: math.NaN(), Undefined: "x"}}
		prob := g.candProb
		if side == 1 {
			prob = g.baseProb
		}
		if prob && n > 0 {
			v[side][8] = stats.Value{V: ll[side] / n}
			v[side][9] = stats.Value{V: sq[side] / n}
		}
	}
	for i := range out {
		if v[0][i].Defined() && v[1][i].Defined() {
			out[i] = v[0][i].V - v[1][i].V
		} else {
			out[i] = math.NaN()
		}
	}
}

// ranking computes ROC AUC and average precision of one model in one pass
// over its rows in ascending score order, tie groups together; pos and neg
// are the weights of the positive and negative rows.
func (k *binKernel) ranking(side int, w []float64, pos, neg float64) (stats.Value, stats.Value) {
	rows, label, first := k.rows[side], k.label[side], k.first[side]
	n := len(rows)
	if pos == 0 {
		u := stats.Value{V: math.NaN(), Undefined: "no positive labels"}
		return u, u
	}
	var negBelow, posBelow, sum, ap float64
	for j := 0; j < n; {
		end := j
		var gPos, gNeg float64
		for end < n && first[end] == int32(j) {
			r := rows[end]
			if label[end] == 1 {
				gPos += w[r]
			} else {
				gNeg += w[r]
			}
			end++
		}
		sum += gPos * (negBelow + gNeg/2)
		// At the threshold of this group, from the top: everything at or
		// above it is predicted positive.
		tp, fp := pos-posBelow, neg-negBelow
		if gPos > 0 {
			ap += gPos / pos * tp / (tp + fp)
		}
		negBelow += gNeg
		posBelow += gPos
		j = end
	}
	auc := stats.Value{V: math.NaN(), Undefined: "no negative labels"}
	if neg > 0 {
		auc = stats.Value{V: sum / (pos * neg)}
	}
	return auc, stats.Value{V: ap}
}
