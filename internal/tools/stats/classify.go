package stats

import (
	"cmp"
	"math"
	"slices"
)

// Binary is the weighted confusion matrix of a binary classifier.
type Binary struct {
	TP, FP, TN, FN float64
}

// BinaryConfusion counts a classifier's predictions against labels (both 0
// or 1), each row weighted by w (nil: 1).
func BinaryConfusion(label, pred []uint8, w []float64) Binary {
	var c Binary
	for i := range label {
		wi := weight(w, i)
		switch {
		case label[i] == 1 && pred[i] == 1:
			c.TP += wi
		case label[i] == 0 && pred[i] == 1:
			c.FP += wi
		case label[i] == 0:
			c.TN += wi
		default:
			c.FN += wi
		}
	}
	return c
}

// N is the total weight.
func (c Binary) N() float64 { return c.TP + c.FP + c.TN + c.FN }

// Accuracy is the share of right predictions.
func (c Binary) Accuracy() Value {
	if c.N() == 0 {
		return undefined("no rows")
	}
	return defined((c.TP + c.TN) / c.N())
}

// Precision is TP / (TP + FP).
func (c Binary) Precision() Value {
	if c.TP+c.FP == 0 {
		return undefined("no positive predictions")
	}
	return defined(c.TP / (c.TP + c.FP))
}

// Recall is TP / (TP + FN).
func (c Binary) Recall() Value {
	if c.TP+c.FN == 0 {
		return undefined("no positive labels")
	}
	return defined(c.TP / (c.TP + c.FN))
}

// F1 is 2 TP / (2 TP + FP + FN).
func (c Binary) F1() Value {
	d := 2*c.TP + c.FP + c.FN
	if d == 0 {
		return undefined("no positive labels and no positive predictions")
	}
	return defined(2 * c.TP / d)
}

// BalancedAccuracy is the mean of recall and specificity.
func (c Binary) BalancedAccuracy() Value {
	switch {
	case c.TP+c.FN == 0:
		return undefined("no positive labels")
	case c.TN+c.FP == 0:
		return undefined("no negative labels")
	}
	return defined((c.TP/(c.TP+c.FN) + c.TN/(c.TN+c.FP)) / 2)
}

// MCC is the Matthews correlation coefficient.
func (c Binary) MCC() Value {
	d := (c.TP + c.FP) * (c.TP + c.FN) * (c.TN + c.FP) * (c.TN + c.FN)
	if d == 0 {
		return undefined("a row or column of the confusion matrix is empty")
	}
	return defined((c.TP*c.TN - c.FP*c.FN) / math.Sqrt(d))
}

// Multiclass is the weighted confusion matrix of a multiclass classifier:
// M[true][predicted], over classes 0..K-1.
type Multiclass struct {
	K int
	M [][]float64
}

// MulticlassConfusion counts predictions against labels (class indexes
// below k), each row weighted by w (nil: 1).
func MulticlassConfusion(k int, label, pred []int32, w []float64) Multiclass {
	m := Multiclass{K: k, M: make([][]float64, k)}
	for i := range m.M {
		m.M[i] = make([]float64, k)
	}
	for i := range label {
		m.M[label[i]][pred[i]] += weight(w, i)
	}
	return m
}

func (m Multiclass) sums() (trueCount, predCount []float64, correct, total float64) {
	trueCount, predCount = make([]float64, m.K), make([]float64, m.K)
	for t := 0; t < m.K; t++ {
		for p := 0; p < m.K; p++ {
			v := m.M[t][p]
			trueCount[t] += v
			predCount[p] += v
			total += v
			if t == p {
				correct += v
			}
		}
	}
	return
}

// Accuracy is the share of right predictions.
func (m Multiclass) Accuracy() Value {
	_, _, correct, total := m.sums()
	if total == 0 {
		return undefined("no rows")
	}
	return defined(correct / total)
}

// PerClass returns precision, recall and F1 of each class. A class with no
// predictions has precision 0, one with no labels recall 0 (the usual
// convention when averaging, as scikit-learn's zero_division=0).
func (m Multiclass) PerClass() (precision, recall, f1 []float64) {
	tc, pc, _, _ := m.sums()
	precision, recall, f1 = make([]float64, m.K), make([]float64, m.K), make([]float64, m.K)
	for k := 0; k < m.K; k++ {
		tp := m.M[k][k]
		if pc[k] > 0 {
			precision[k] = tp / pc[k]
		}
		if tc[k] > 0 {
			recall[k] = tp / tc[k]
		}
		if precision[k]+recall[k] > 0 {
			f1[k] = 2 * precision[k] * recall[k] / (precision[k] + recall[k])
		}
	}
	return
}

// present lists the classes that occur as a label or a prediction.
func (m Multiclass) present() []int {
	tc, pc, _, _ := m.sums()
	var out []int
	for k := 0; k < m.K; k++ {
		if tc[k] > 0 || pc[k] > 0 {
			out = append(out, k)
		}
	}
	return out
}

// Macro averages a per-class value over the classes present.
func (m Multiclass) Macro(per []float64) Value {
	cls := m.present()
	if len(cls) == 0 {
		return undefined("no rows")
	}
	s := 0.0
	for _, k := range cls {
		s += per[k]
	}
	return defined(s / float64(len(cls)))
}

// Weighted averages a per-class value weighted by each class's labels.
func (m Multiclass) Weighted(per []float64) Value {
	tc, _, _, total := m.sums()
	if total == 0 {
		return undefined("no rows")
	}
	s := 0.0
	for k := 0; k < m.K; k++ {
		s += per[k] * tc[k]
	}
	return defined(s / total)
}

// MicroF1 is F1 over all decisions; for single-label data it equals
// accuracy.
func (m Multiclass) MicroF1() Value { return m.Accuracy() }

// BalancedAccuracy is the mean recall over the classes that occur as
// labels.
func (m Multiclass) BalancedAccuracy() Value {
	tc, _, _, _ := m.sums()
	_, recall, _ := m.PerClass()
	s, n := 0.0, 0
	for k := 0; k < m.K; k++ {
		if tc[k] > 0 {
			s += recall[k]
			n++
		}
	}
	if n == 0 {
		return undefined("no rows")
	}
	return defined(s / float64(n))
}

// MCC is the multiclass Matthews correlation coefficient (Gorodkin's R_K).
func (m Multiclass) MCC() Value {
	tc, pc, c, s := m.sums()
	var sumPT, sumP2, sumT2 float64
	for k := 0; k < m.K; k++ {
		sumPT += pc[k] * tc[k]
		sumP2 += pc[k] * pc[k]
		sumT2 += tc[k] * tc[k]
	}
	d := (s*s - sumP2) * (s*s - sumT2)
	if d == 0 {
		return undefined("all labels, or all predictions, are one class")
	}
	return defined((c*s - sumPT) / math.Sqrt(d))
}

// Order returns the row indexes sorted by score, ascending; ties in row
// order.
func Order(score []float64) []int32 {
	type pair struct {
		v float64
		i int32
	}
	ps := make([]pair, len(score))
	for i, v := range score {
		ps[i] = pair{v, int32(i)}
	}
	slices.SortFunc(ps, func(a, b pair) int {
		if c := cmp.Compare(a.v, b.v); c != 0 {
			return c
		}
		return cmp.Compare(a.i, b.i)
	})
	idx := make([]int32, len(score))
	for i, p := range ps {
		idx[i] = p.i
	}
	return idx
}

// ROCAUC is the area under the ROC curve: the chance that a positive row
// scores above a negative one, ties counting half. order is Order(score).
func ROCAUC(label []uint8, score []float64, order []int32, w []float64) Value {
	var pos, neg, negBelow, sum float64
	for i := 0; i < len(order); {
		j := i
		var gPos, gNeg float64
		for j < len(order) && score[order[j]] == score[order[i]] {
			r := order[j]
			if label[r] == 1 {
				gPos += weight(w, int(r))
			} else {
				gNeg += weight(w, int(r))
			}
			j++
		}
		sum += gPos * (negBelow + gNeg/2)
		negBelow += gNeg
		pos += gPos
		neg += gNeg
		i = j
	}
	switch {
	case pos == 0:
		return undefined("no positive labels")
	case neg == 0:
		return undefined("no negative labels")
	}
	return defined(sum / (pos * neg))
}

// AveragePrecision is the area under the precision-recall curve as the
// weighted mean of precision at each threshold (no interpolation), over
// thresholds from the highest score down. order is Order(score).
func AveragePrecision(label []uint8, score []float64, order []int32, w []float64) Value {
	var pos float64
	for i := range label {
		if label[i] == 1 {
			pos += weight(w, i)
		}
	}
	if pos == 0 {
		return undefined("no positive labels")
	}
	var tp, fp, ap float64
	for i := len(order) - 1; i >= 0; {
		j := i
		var gPos, gNeg float64
		for j >= 0 && score[order[j]] == score[order[i]] {
			r := order[j]
			if label[r] == 1 {
				gPos += weight(w, int(r))
			} else {
				gNeg += weight(w, int(r))
			}
			j--
		}
		tp += gPos
		fp += gNeg
		if gPos > 0 {
			ap += gPos / pos * tp / (tp + fp)
		}
		i = j
	}
	return defined(ap)
}

// LogEps bounds probabilities away from 0 and 1 in the log loss: the
// machine epsilon of float64, as scikit-learn's log_loss clips by default
// since version 1.5 (eps="auto"; before, 1e-15). From memory of its
// documentation; a log loss of predictions away from 0 and 1 does not
// depend on it.
const LogEps = 2.220446049250313e-16

// LogLoss is the mean negative log likelihood of the labels under the
// probabilities of the positive class.
func LogLoss(label []uint8, prob []float64, w []float64) Value {
	var s, n float64
	for i := range label {
		p := math.Min(math.Max(prob[i], LogEps), 1-LogEps)
		wi := weight(w, i)
		if label[i] == 1 {
			s -= wi * math.Log(p)
		} else {
			s -= wi * math.Log(1-p)
		}
		n += wi
	}
	if n == 0 {
		return undefined("no rows")
	}
	return defined(s / n)
}

// Brier is the mean squared difference between probability and label.
func Brier(label []uint8, prob []float64, w []float64) Value {
	var s, n float64
	for i := range label {
		d := prob[i] - float64(label[i])
		wi := weight(w, i)
		s += wi * d * d
		n += wi
	}
	if n == 0 {
		return undefined("no rows")
	}
	return defined(s / n)
}

// WeightedMean is the weighted mean of x.
func WeightedMean(x, w []float64) Value {
	var s, n float64
	for i := range x {
		wi := weight(w, i)
		s += wi * x[i]
		n += wi
	}
	if n == 0 {
		return undefined("no rows")
	}
	return defined(s / n)
}
