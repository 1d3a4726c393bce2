package trigger

import (
	"testing"
	"time"

	"plumbline.dev/plumbline/internal/engine/promq"
)

// A month of a healthy but noisy quality signal, one point a minute: mean
// 0.82, standard deviation 0.02, slowly wandering (lag-one autocorrelation
// 0.95), with scrapes lost in bursts. The threshold, 0.78, is two standard
// deviations below the mean. The numbers are synthetic.
func noisyMonth(seed uint64) NoisySeries {
	return NoisySeries{Seed: seed, Start: time.Date(2026, 10, 1, 0, 0, 0, 0, time.UTC), Step: time.Minute,
		Points: 30 * 24 * 60, Mean: 0.82, SD: 0.02, Rho: 0.95, GapRate: 0.002, MaxGap: 20}
}

var below78 = Threshold{Below: b(0.78)}

// Longer windows fire less often on noise, never more.
func TestFalseAlarmsFallWithTheWindow(t *testing.T) {
	pts := noisyMonth(1).Generate()
	prev := -1
	for i, f := range []time.Duration{5 * time.Minute, 15 * time.Minute, 30 * time.Minute, time.Hour, 3 * time.Hour} {
		n := Episodes(Replay(pts, below78, Window{For: f, Every: time.Minute}))
		if i == 0 && n == 0 {
			t.Fatal("the shortest window never fired on the noise; the study would show nothing")
		}
		if prev >= 0 && n > prev {
			t.Errorf("window %s fired %d times, more than the shorter window's %d", f, n, prev)
		}
		prev = n
	}
	if prev != 0 {
		t.Errorf("a three-hour window fired %d times on stationary noise", prev)
	}
}

// Asking for more of the window's points leaves more evaluations Unknown and
// fires no more often.
func TestCoverageTradesUnknownsForFalseAlarms(t *testing.T) {
	pts := noisyMonth(2).Generate()
	w := Window{For: 15 * time.Minute, Every: time.Minute}
	prevUnknown, prevEpisodes := -1.0, 1<<30
	for _, c := range []float64{0.5, 0.8, 1.0} {
		w.Coverage = c
		evals := Replay(pts, below78, w)
		u, n := UnknownShare(evals), Episodes(evals)
		if u < prevUnknown {
			t.Errorf("coverage %.1f: %.4f unknown, less than at a lower coverage (%.4f)", c, u, prevUnknown)
		}
		if n > prevEpisodes {
			t.Errorf("coverage %.1f: %d firings, more than at a lower coverage (%d)", c, n, prevEpisodes)
		}
		prevUnknown, prevEpisodes = u, n
	}
	if prevUnknown == 0 {
		t.Error("full coverage left nothing Unknown despite the gaps")
	}
}

// A clear step drop is caught one window after it happens, within one
// evaluation period.
func TestStepDropIsCaughtOneWindowLater(t *testing.T) {
	for _, f := range []time.Duration{10 * time.Minute, time.Hour, 6 * time.Hour} {
		s := noisyMonth(3)
		s.GapRate = 0
		s.Points = 3 * 24 * 60
		s.DropAt = s.Start.Add(36*time.Hour + 17*time.Minute)
		s.Drop = 0.12 // to 0.70, four standard deviations under the threshold
		w := Window{For: f, Every: time.Minute}
		at, ok := FirstFiring(Replay(s.Generate(), below78, w), s.DropAt)
		if !ok {
			t.Fatalf("window %s: the drop never fired", f)
		}
		delay := at.Sub(s.DropAt)
		if delay < f || delay > f+w.Every {
			t.Errorf("window %s: fired %s after the drop, want %s to %s", f, delay, f, f+w.Every)
		}
	}
}

func TestNoisySeriesIsSeeded(t *testing.T) {
	a, b := noisyMonth(7).Generate(), noisyMonth(7).Generate()
	if len(a) != len(b) || a[1000] != b[1000] {
		t.Error("the same seed gave different series")
	}
	if c := noisyMonth(8).Generate(); c[1000] == a[1000] {
		t.Error("different seeds gave the same point")
	}
	// Stationary around the mean: the month's average is close to it.
	sum := 0.0
	for _, p := range a {
		sum += p.V
	}
	if m := sum / float64(len(a)); m < 0.81 || m > 0.83 {
		t.Errorf("mean %.4f, want about 0.82", m)
	}
}

func TestRangeQueryLookback(t *testing.T) {
	t0 := time.Date(2026, 11, 2, 9, 0, 0, 0, time.UTC)
	samples := []promq.Point{{T: t0, V: 1}, {T: t0.Add(2 * time.Minute), V: 2}, {T: t0.Add(10 * time.Minute), V: 3}}
	got := RangeQuery(samples, t0.Add(-time.Minute), t0.Add(10*time.Minute), time.Minute)
	// 08:59 has no sample yet; 09:00-09:01 see 1; 09:02-09:07 see 2 (five
	// minutes of lookback); 09:08-09:09 see nothing; 09:10 sees 3.
	want := []float64{1, 1, 2, 2, 2, 2, 2, 2, 3}
	if len(got) != len(want) {
		t.Fatalf("%d points, want %d: %v", len(got), len(want), got)
	}
	for i, p := range got {
		if p.V != want[i] {
			t.Errorf("point %d at %s = %v, want %v", i, p.T.Format("15:04"), p.V, want[i])
		}
	}
	if !got[0].T.Equal(t0) || !got[len(got)-1].T.Equal(t0.Add(10*time.Minute)) {
		t.Errorf("steps %s..%s", got[0].T, got[len(got)-1].T)
	}
}
