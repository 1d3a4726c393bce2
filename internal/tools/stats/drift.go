package stats

import (
	"math"
	"slices"
	"sort"
)

// KS is a two-sample Kolmogorov-Smirnov test.
type KS struct {
	D      float64
	PValue float64
	// Exact says the p-value counts lattice paths exactly; otherwise it is
	// the asymptotic Kolmogorov distribution.
	Exact bool
}

// KSExactUpTo is the largest sample for which the exact p-value is
// computed: SciPy's ks_2samp, method "auto" (its default), is exact while
// max(n, m) <= 10,000 and asymptotic above.
const KSExactUpTo = 10000

// KSExact says whether samples of sizes n and m get the exact p-value.
func KSExact(n, m int) bool { return max(n, m) <= KSExactUpTo }

// KSTest compares two samples. Both are sorted in place.
func KSTest(a, b []float64) KS {
	slices.Sort(a)
	slices.Sort(b)
	n, m := len(a), len(b)
	if n == 0 || m == 0 {
		return KS{D: math.NaN(), PValue: math.NaN()}
	}
	d := ksD(a, b)
	if KSExact(n, m) {
		return KS{D: d, PValue: ksExactP(d, n, m), Exact: true}
	}
	// The asymptotic Kolmogorov distribution with Stephens' small-sample
	// correction of its argument (as Numerical Recipes gives it).
	en := math.Sqrt(float64(n) * float64(m) / float64(n+m))
	return KS{D: d, PValue: kolmogorovSurvival(d * (en + 0.12 + 0.11/en))}
}

// ksD is the largest distance between the empirical distribution functions
// of two sorted samples.
func ksD(a, b []float64) float64 {
	n, m := len(a), len(b)
	i, j := 0, 0
	d := 0.0
	for i < n && j < m {
		x := math.Min(a[i], b[j])
		for i < n && a[i] <= x {
			i++
		}
		for j < m && b[j] <= x {
			j++
		}
		d = math.Max(d, math.Abs(float64(i)/float64(n)-float64(j)/float64(m)))
	}
	return d
}

// ksExactP is P(D >= d) for samples of sizes n and m from one continuous
// distribution: one minus the share of monotone lattice paths from (0,0) to
// (n,m) that keep |i/n - j/m| below d everywhere. Only the cells of the
// band are visited: O(n * d * m) rather than O(n * m), which keeps the
// exact route affordable up to 10,000 x 10,000.
func ksExactP(d float64, n, m int) float64 {
	// Paths are counted as probabilities (each step's weight divided out) to
	// keep the numbers in range: u[j] is the chance of reaching (i, j)
	// inside the band.
	eps := 1e-12
	inside := func(i, j int) bool {
		return math.Abs(float64(i)/float64(n)-float64(j)/float64(m)) < d-eps
	}
	u := make([]float64, m+1)
	for j := 0; j <= m; j++ {
		if inside(0, j) {
			u[j] = 1
		} else {
			break
		}
	}
	fm, fn := float64(m), float64(n)
	for i := 1; i <= n; i++ {
		// The band's cells of this row lie within [lo, hi]: the cell left of
		// lo is outside it, and cells of the row before beyond its own band
		// are 0, so only these are visited.
		lo := max(0, int(math.Floor(fm*(float64(i)/fn-d)))-1)
		hi := min(m, int(math.Ceil(fm*(float64(i)/fn+d)))+1)
		// u(i,j) = N(i,j)/C(i+j,i) with N(i,j) = N(i-1,j) + N(i,j-1), so
		// u(i,j) = u(i-1,j)*i/(i+j) + u(i,j-1)*j/(i+j).
		prev := 0.0
		for j := lo; j <= hi; j++ {
			if !inside(i, j) {
				u[j] = 0
				prev = 0
				continue
			}
			up := u[j] * float64(i) / float64(i+j) // from (i-1, j)
			left := 0.0
			if j > 0 {
				left = prev * float64(j) / float64(i+j) // from (i, j-1)
			}
			u[j] = up + left
			prev = u[j]
		}
	}
	p := 1 - u[m]
	return math.Min(1, math.Max(0, p))
}

// kolmogorovSurvival is P(K > x) for the Kolmogorov distribution.
func kolmogorovSurvival(x float64) float64 {
	if x <= 0 {
		return 1
	}
	if x < 0.27 {
		// The series converges slowly here; the survival is 1 to double
		// precision for small x.
		return 1
	}
	s := 0.0
	for k := 1; k <= 100; k++ {
		term := 2 * math.Exp(-2*float64(k*k)*x*x)
		if k%2 == 0 {
			s -= term
		} else {
			s += term
		}
		if term < 1e-16 {
			break
		}
	}
	return math.Min(1, math.Max(0, s))
}

// Wasserstein1 is the first Wasserstein (earth mover's) distance between
// two weighted samples (nil weights: 1 each): the area between their
// distribution functions.
func Wasserstein1(a, b, wa, wb []float64) float64 {
	type pt struct {
		x    float64
		w    float64
		side int
	}
	var pts []pt
	var ta, tb float64
	for i, x := range a {
		w := weight(wa, i)
		pts = append(pts, pt{x, w, 0})
		ta += w
	}
	for i, x := range b {
		w := weight(wb, i)
		pts = append(pts, pt{x, w, 1})
		tb += w
	}
	if ta == 0 || tb == 0 {
		return math.NaN()
	}
	sort.Slice(pts, func(i, j int) bool { return pts[i].x < pts[j].x })
	var fa, fb, area float64
	for i := 0; i < len(pts); i++ {
		if pts[i].side == 0 {
			fa += pts[i].w / ta
		} else {
			fb += pts[i].w / tb
		}
		if i+1 < len(pts) {
			area += math.Abs(fa-fb) * (pts[i+1].x - pts[i].x)
		}
	}
	return area
}

// Wasserstein1Sorted is Wasserstein1 of two unweighted samples already
// sorted ascending, by merging them: no sort, no copy.
func Wasserstein1Sorted(a, b []float64) float64 {
	n, m := len(a), len(b)
	if n == 0 || m == 0 {
		return math.NaN()
	}
	i, j := 0, 0
	var area, x float64
	first := true
	for i < n || j < m {
		var next float64
		if j >= m || i < n && a[i] <= b[j] {
			next = a[i]
		} else {
			next = b[j]
		}
		if !first {
			area += math.Abs(float64(i)/float64(n)-float64(j)/float64(m)) * (next - x)
		}
		first = false
		x = next
		for i < n && a[i] == x {
			i++
		}
		for j < m && b[j] == x {
			j++
		}
	}
	return area
}

// JensenShannonDistance is the square root of the Jensen-Shannon divergence
// between two distributions (normalised here), in the given log base.
func JensenShannonDistance(p, q []float64, base float64) float64 {
	np, nq := normalise(p), normalise(q)
	var js float64
	for i := range np {
		m := (np[i] + nq[i]) / 2
		if np[i] > 0 {
			js += np[i] * math.Log(np[i]/m) / 2
		}
		if nq[i] > 0 {
			js += nq[i] * math.Log(nq[i]/m) / 2
		}
	}
	js /= math.Log(base)
	return math.Sqrt(math.Max(js, 0))
}

func normalise(x []float64) []float64 {
	s := 0.0
	for _, v := range x {
		s += v
	}
	out := make([]float64, len(x))
	if s == 0 {
		return out
	}
	for i, v := range x {
		out[i] = v / s
	}
	return out
}

// ChiSquareHomogeneity tests whether the rows of a contingency table (here
// two: reference and current counts per category) come from one
// distribution. Categories empty in both rows are left out.
func ChiSquareHomogeneity(table [][]float64) (stat float64, dof int, p float64, expected [][]float64) {
	rows := len(table)
	if rows == 0 {
		return math.NaN(), 0, math.NaN(), nil
	}
	var keep []int
	for j := range table[0] {
		s := 0.0
		for i := 0; i < rows; i++ {
			s += table[i][j]
		}
		if s > 0 {
			keep = append(keep, j)
		}
	}
	rowSum := make([]float64, rows)
	colSum := make([]float64, len(keep))
	total := 0.0
	for i := 0; i < rows; i++ {
		for k, j := range keep {
			rowSum[i] += table[i][j]
			colSum[k] += table[i][j]
			total += table[i][j]
		}
	}
	expected = make([][]float64, rows)
	for i := 0; i < rows; i++ {
		expected[i] = make([]float64, len(keep))
		for k, j := range keep {
			e := rowSum[i] * colSum[k] / total
			expected[i][k] = e
			if e > 0 {
				d := table[i][j] - e
				stat += d * d / e
			}
		}
	}
	dof = (rows - 1) * (len(keep) - 1)
	if dof <= 0 {
		return 0, dof, 1, expected
	}
	return stat, dof, ChiSquareSurvival(stat, float64(dof)), expected
}

// PSIFloor is the share given to an empty bin in the population stability
// index, so its log stays finite (common practice: a small constant such as
// 0.0001).
const PSIFloor = 1e-4

// PSI is the population stability index of two binned distributions (bin
// counts or shares): the sum over bins of (a - e) * ln(a / e), empty bins
// floored at PSIFloor.
func PSI(expected, actual []float64) float64 {
	e, a := normalise(expected), normalise(actual)
	s := 0.0
	for i := range e {
		ei, ai := math.Max(e[i], PSIFloor), math.Max(a[i], PSIFloor)
		s += (ai - ei) * math.Log(ai/ei)
	}
	return s
}
