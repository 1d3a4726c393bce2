package backtest

import (
	"fmt"
	"image/color"
	"math"
	"path/filepath"
	"strings"
	"time"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"

	"plumbline.dev/plumbline/internal/engine/promq"
)

var (
	colHistory  = color.RGBA{R: 160, G: 160, B: 160, A: 255}
	colPolicy   = color.RGBA{R: 31, G: 97, B: 171, A: 255}
	colTarget   = color.RGBA{R: 200, G: 40, B: 40, A: 255}
	colRetrain  = color.RGBA{R: 30, G: 140, B: 60, A: 255}
	colBelowBox = color.NRGBA{R: 230, G: 90, B: 90, A: 70}
)

// maxChartPoints keeps a chart's lines light: longer series are thinned to
// about this many points (every k-th, plus each stretch's ends untouched).
const maxChartPoints = 4000

func xys(pts []promq.Point) plotter.XYs {
	k := max(1, len(pts)/maxChartPoints)
	out := make(plotter.XYs, 0, len(pts)/k+1)
	for i := 0; i < len(pts); i += k {
		out = append(out, plotter.XY{X: float64(pts[i].T.Unix()), Y: pts[i].V})
	}
	return out
}

// Chart draws the history, one policy's simulated series, the target, the
// policy's retrains and its stretches below target, to an SVG or PNG file
// (by the extension).
func Chart(path string, h *History, r *Report, policyName string) error {
	ext := strings.ToLower(filepath.Ext(path))
	if ext != ".svg" && ext != ".png" {
		return fmt.Errorf("--chart %s: name an .svg or .png file", path)
	}
	var res *Result
	for _, x := range r.Results {
		if x.Policy == policyName {
			res = x
		}
	}
	if res == nil {
		var names []string
		for _, x := range r.Results {
			names = append(names, x.Policy)
		}
		return fmt.Errorf("--chart-policy %q: no such policy; the policies are %s", policyName, strings.Join(names, ", "))
	}
	p := plot.New()
	p.Title.Text = fmt.Sprintf("%s: %d retrains, %s below target", res.Policy, len(res.Retrains), hours(res.BelowSeconds))
	p.Y.Label.Text = "quality"
	format := "Jan 2\n15:04"
	if h.Span() > 3*24*time.Hour {
		format = "Jan 2"
	}
	p.X.Tick.Marker = plot.TimeTicks{Format: format}
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, s := range [][]promq.Point{h.Points, res.Simulated} {
		for _, pt := range s {
			lo, hi = math.Min(lo, pt.V), math.Max(hi, pt.V)
		}
	}
	lo, hi = math.Min(lo, r.Model.Target), math.Max(hi, r.Model.Target)
	pad := (hi - lo) * 0.05
	if pad == 0 {
		pad = 0.01
	}
	lo, hi = lo-pad, hi+pad
	p.Y.Min, p.Y.Max = lo, hi
	// Stretches below target, shaded.
	for _, e := range res.Episodes {
		x0, x1 := float64(e.Start.Unix()), float64(e.End.Unix())
		box, err := plotter.NewPolygon(plotter.XYs{{X: x0, Y: lo}, {X: x1, Y: lo}, {X: x1, Y: hi}, {X: x0, Y: hi}})
		if err != nil {
			return err
		}
		box.Color, box.LineStyle.Width = colBelowBox, 0
		p.Add(box)
	}
	hist, err := plotter.NewLine(xys(h.Points))
	if err != nil {
		return err
	}
	hist.Color, hist.Width = colHistory, vg.Points(0.8)
	sim, err := plotter.NewLine(xys(res.Simulated))
	if err != nil {
		return err
	}
	sim.Color, sim.Width = colPolicy, vg.Points(1.2)
	from, to := float64(h.Points[0].T.Unix()), float64(h.Points[len(h.Points)-1].T.Unix())
	target, err := plotter.NewLine(plotter.XYs{{X: from, Y: r.Model.Target}, {X: to, Y: r.Model.Target}})
	if err != nil {
		return err
	}
	target.Color, target.Dashes = colTarget, []vg.Length{vg.Points(4), vg.Points(3)}
	p.Add(hist, sim, target)
	p.Legend.Add("history", hist)
	p.Legend.Add("under "+res.Policy, sim)
	p.Legend.Add(fmt.Sprintf("target %g", r.Model.Target), target)
	for i, rt := range res.Retrains {
		x := float64(rt.Start.Unix())
		l, err := plotter.NewLine(plotter.XYs{{X: x, Y: lo}, {X: x, Y: hi}})
		if err != nil {
			return err
		}
		l.Color, l.Width = colRetrain, vg.Points(0.8)
		p.Add(l)
		if i == 0 {
			p.Legend.Add("retrain started", l)
		}
	}
	// Below the curves, where a quality chart has room.
	p.Legend.Left = true
	p.Legend.XOffs, p.Legend.YOffs = vg.Points(8), vg.Points(8)
	return p.Save(28*vg.Centimeter, 12*vg.Centimeter, path)
}

// ChartStaleness draws per-batch quality against age with both fits and the
// target plus margin.
func ChartStaleness(path string, h *History, s *Staleness) error {
	ext := strings.ToLower(filepath.Ext(path))
	if ext != ".svg" && ext != ".png" {
		return fmt.Errorf("--chart %s: name an .svg or .png file", path)
	}
	p := plot.New()
	p.Title.Text = fmt.Sprintf("decay since training at %s", s.TrainedAt.Format(time.RFC3339))
	p.X.Label.Text = "age (days)"
	p.Y.Label.Text = "quality"
	var pts plotter.XYs
	maxAge := 0.0
	for _, pt := range h.Points {
		age := pt.T.Sub(s.TrainedAt).Hours() / 24
		pts = append(pts, plotter.XY{X: age, Y: pt.V})
		maxAge = math.Max(maxAge, age)
	}
	if s.ReachDays != nil {
		maxAge = math.Max(maxAge, *s.ReachDays*1.1)
	}
	sc, err := plotter.NewScatter(pts)
	if err != nil {
		return err
	}
	sc.GlyphStyle.Color, sc.GlyphStyle.Radius = colHistory, vg.Points(2)
	p.Add(sc)
	p.Legend.Add("per-batch quality", sc)
	for _, f := range []Fit{s.Linear, s.Exponential} {
		if f.Unfit != "" {
			continue
		}
		var curve plotter.XYs
		for i := 0; i <= 100; i++ {
			age := maxAge * float64(i) / 100
			curve = append(curve, plotter.XY{X: age, Y: f.At(age)})
		}
		l, err := plotter.NewLine(curve)
		if err != nil {
			return err
		}
		l.Color = colPolicy
		if f.Model == "exponential" {
			l.Color = colRetrain
		}
		p.Add(l)
		p.Legend.Add(fmt.Sprintf("%s fit (R² %.3f)", f.Model, f.R2), l)
	}
	bound := s.Target + s.Margin
	if s.Better == "lower" {
		bound = s.Target - s.Margin
	}
	b, err := plotter.NewLine(plotter.XYs{{X: 0, Y: bound}, {X: maxAge, Y: bound}})
	if err != nil {
		return err
	}
	b.Color, b.Dashes = colTarget, []vg.Length{vg.Points(4), vg.Points(3)}
	p.Add(b)
	p.Legend.Add("target with margin", b)
	p.Legend.Top = true
	return p.Save(20*vg.Centimeter, 12*vg.Centimeter, path)
}
