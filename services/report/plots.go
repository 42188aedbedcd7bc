package report

import (
	"fmt"
	"image/color"
	"io"
	"math"
	"os"
	"path/filepath"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
	"gonum.org/v1/plot/vg/vgsvg"

	"github.com/bunchsieve/bunchsieve/services/report/stats"
)

// Plot sizes: PNGs are rendered at PlotDPI, so a PlotWidth x PlotHeight
// plot is 800 x 500 pixels and the overlap map 700 x 620.
const (
	PlotDPI       = 100
	PlotWidth     = 8 * vg.Inch
	PlotHeight    = 5 * vg.Inch
	OverlapWidth  = 7 * vg.Inch
	OverlapHeight = 6.2 * vg.Inch
)

// overlapMargin is the blank border around the overlap map. Its plot
// keeps room for the glyphs it knows of, the cells' centres and the tick
// labels, so the outer half of the last column and the longest rule name
// on the left would otherwise reach the edge of the image and be cut.
const overlapMargin = 0.15 * vg.Inch

// The report's own colours.
var (
	colourPoints  = color.RGBA{R: 0x1f, G: 0x6e, B: 0x78, A: 0xff} // deep teal
	colourFit     = color.RGBA{R: 0xc2, G: 0x5b, B: 0x14, A: 0xff} // burnt orange
	colourSecond  = color.RGBA{R: 0x6d, G: 0x4c, B: 0x8e, A: 0xff} // muted violet
	colourGuide   = color.RGBA{R: 0x8a, G: 0x8f, B: 0x94, A: 0xff} // grey
	colourLow     = color.RGBA{R: 0xfa, G: 0xf6, B: 0xee, A: 0xff} // cream
	colourHigh    = color.RGBA{R: 0x12, G: 0x3f, B: 0x4c, A: 0xff} // ink teal
	colourLabelOn = color.RGBA{R: 0xff, G: 0xff, B: 0xff, A: 0xff}
)

// PlotFiles returns the base names (without extension) of the plots
// WritePlots makes, in order: one per scan, the overlap map, one per
// turn-on curve.
func (r *Report) PlotFiles() []string {
	var names []string
	for k, sc := range r.Scans {
		names = append(names, fmt.Sprintf("scan_%d_%s", k, branchName(sc.Rule)))
	}
	names = append(names, "overlap")
	for k := range r.Efficiencies {
		ef := &r.Efficiencies[k]
		names = append(names, fmt.Sprintf("turnon_%d_%s_%s", k, branchName(ef.Rule), branchName(ef.Reference)))
	}
	return names
}

// WritePlots writes every plot as NAME.png and NAME.svg into dir.
func (r *Report) WritePlots(dir string) error {
	names := r.PlotFiles()
	k := 0
	for i := range r.Scans {
		if err := save(dir, names[k], scanPlot(&r.Scans[i]), PlotWidth, PlotHeight, 0); err != nil {
			return err
		}
		k++
	}
	if err := save(dir, names[k], overlapPlot(r), OverlapWidth, OverlapHeight, overlapMargin); err != nil {
		return err
	}
	k++
	for i := range r.Efficiencies {
		if err := save(dir, names[k], turnOnPlot(&r.Efficiencies[i], r.ConfidenceLevel), PlotWidth, PlotHeight, 0); err != nil {
			return err
		}
		k++
	}
	return nil
}

// save draws p, inside a blank margin on every side, as a w x h PNG and
// SVG.
func save(dir, name string, p *plot.Plot, w, h, margin vg.Length) error {
	inset := func(c draw.Canvas) draw.Canvas { return draw.Crop(c, margin, -margin, margin, -margin) }
	png := vgimg.NewWith(vgimg.UseWH(w, h), vgimg.UseDPI(PlotDPI), vgimg.UseBackgroundColor(color.White))
	p.Draw(inset(draw.New(png)))
	svg := vgsvg.New(w, h)
	sc := draw.New(svg)
	if margin > 0 {
		// The plot paints its background inside the margin only.
		sc.SetColor(color.White)
		sc.Fill(sc.Rectangle.Path())
	}
	p.Draw(inset(sc))
	if err := writeFile(filepath.Join(dir, name+".png"), vgimg.PngCanvas{Canvas: png}); err != nil {
		return err
	}
	return writeFile(filepath.Join(dir, name+".svg"), svg)
}

func writeFile(path string, c io.WriterTo) error {
	f, err := os.Create(path)
	if err != nil {
		return fmt.Errorf("report: %w", err)
	}
	if _, err := c.WriteTo(f); err != nil {
		f.Close()
		return fmt.Errorf("report: %s: %w", path, err)
	}
	if err := f.Close(); err != nil {
		return fmt.Errorf("report: %w", err)
	}
	return nil
}

func newPlot(title, x, y string) *plot.Plot {
	p := plot.New()
	p.Title.Text = title
	p.X.Label.Text = x
	p.Y.Label.Text = y
	p.Add(plotter.NewGrid())
	return p
}

// errPoints is a set of points with asymmetric y errors (and x half
// widths) for the error-bar plotters.
type errPoints struct {
	plotter.XYs
	plotter.YErrors
	plotter.XErrors
}

func scanPlot(sc *Scan) *plot.Plot {
	p := newPlot(fmt.Sprintf("rate of %s vs threshold (%s)", sc.Rule, sc.Threshold), "threshold [GeV]", "rate [Hz]")
	positive := 0
	for _, pt := range sc.Points {
		if pt.Before.RateHz > 0 {
			positive++
		}
	}
	logY := positive >= 2
	if logY {
		p.Y.Scale = plot.LogScale{}
		p.Y.Tick.Marker = plot.TickerFunc(logTicks)
	}
	series := func(after bool, c color.Color, label string) {
		var pts errPoints
		for _, pt := range sc.Points {
			r := pt.Before
			if after {
				r = pt.After
			}
			if logY && r.RateHz <= 0 {
				continue // no place on a log axis
			}
			lo := r.ErrorHz
			if logY && r.RateHz-lo <= 0 {
				lo = r.RateHz * 0.9 // keep the bar on the axis
			}
			pts.XYs = append(pts.XYs, plotter.XY{X: pt.ThresholdGeV, Y: r.RateHz})
			pts.YErrors = append(pts.YErrors, struct{ Low, High float64 }{lo, r.ErrorHz})
		}
		if len(pts.XYs) == 0 {
			return
		}
		sct, _ := plotter.NewScatter(pts.XYs)
		sct.GlyphStyle.Color, sct.GlyphStyle.Radius, sct.GlyphStyle.Shape = c, vg.Points(2.5), draw.CircleGlyph{}
		bars, _ := plotter.NewYErrorBars(pts)
		bars.LineStyle.Color = c
		line, _ := plotter.NewLine(pts.XYs)
		line.LineStyle.Color, line.LineStyle.Width = c, vg.Points(0.8)
		p.Add(line, bars, sct)
		p.Legend.Add(label, sct)
	}
	series(false, colourPoints, "before prescale")
	if sc.Prescale > 1 {
		series(true, colourSecond, fmt.Sprintf("after prescale %d", sc.Prescale))
	}
	for _, pt := range sc.Points {
		if pt.ThresholdGeV == sc.Nominal && (!logY || pt.Before.RateHz > 0) {
			ring, _ := plotter.NewScatter(plotter.XYs{{X: pt.ThresholdGeV, Y: pt.Before.RateHz}})
			ring.GlyphStyle.Color, ring.GlyphStyle.Radius, ring.GlyphStyle.Shape = colourFit, vg.Points(5), draw.RingGlyph{}
			p.Add(ring)
			p.Legend.Add(fmt.Sprintf("the menu's threshold, %g GeV", sc.Nominal), ring)
		}
	}
	p.Legend.Top = true
	return p
}

// logTicks marks 1, 2 and 5 times each power of ten, labelled in SI
// form, and every power of ten alone when the range spans many decades.
func logTicks(lo, hi float64) []plot.Tick {
	if !(lo > 0) || !(hi > lo) {
		return nil
	}
	decades := math.Log10(hi / lo)
	var ticks []plot.Tick
	for e := math.Floor(math.Log10(lo)); e <= math.Ceil(math.Log10(hi)); e++ {
		base := math.Pow(10, e)
		for _, m := range []float64{1, 2, 5} {
			v := m * base
			if v < lo || v > hi {
				continue
			}
			label := ""
			if m == 1 || decades < 3 {
				label = si(v)
			}
			ticks = append(ticks, plot.Tick{Value: v, Label: label})
		}
	}
	return ticks
}

// overlapPalette shades from cream (0) to ink teal (1).
type overlapPalette struct{}

func (overlapPalette) Colors() []color.Color {
	const n = 64
	out := make([]color.Color, n)
	for i := range out {
		t := float64(i) / (n - 1)
		mix := func(a, b uint8) uint8 { return uint8(math.Round(float64(a) + t*(float64(b)-float64(a)))) }
		out[i] = color.RGBA{R: mix(colourLow.R, colourHigh.R), G: mix(colourLow.G, colourHigh.G), B: mix(colourLow.B, colourHigh.B), A: 0xff}
	}
	return out
}

// overlapGrid is the passed-fraction matrix: column i is the rule whose
// passing events are counted, row j the rule that passes them too.
type overlapGrid struct{ f [][]float64 }

func (g overlapGrid) Dims() (c, r int)   { return len(g.f), len(g.f) }
func (g overlapGrid) Z(c, r int) float64 { return g.f[c][r] }
func (g overlapGrid) X(c int) float64    { return float64(c) }
func (g overlapGrid) Y(r int) float64    { return float64(r) }
func (g overlapGrid) Min() float64       { return 0 }
func (g overlapGrid) Max() float64       { return 1 }

// overlapNumbersMaxRules is the largest menu whose overlap heat map has
// each cell's value printed in it: beyond it a cell of the 700-pixel plot
// is narrower than "0.00" at 7 points, and the numbers would overprint
// each other (they are in report.json and report.root). Drawing them was
// also most of the time the plots took for a 60-rule menu.
const overlapNumbersMaxRules = 20

func overlapPlot(r *Report) *plot.Plot {
	ov := r.Overlap
	p := plot.New()
	p.Title.Text = "overlap before prescale: share of the column rule's events the row rule passes"
	p.Title.TextStyle.Font.Size = vg.Points(10)
	n := len(ov.Rules)
	h := plotter.NewHeatMap(overlapGrid{ov.PassedFraction}, overlapPalette{})
	h.Min, h.Max = 0, 1
	p.Add(h)
	var ticks []plot.Tick
	var lab plotter.XYLabels
	for i, name := range ov.Rules {
		ticks = append(ticks, plot.Tick{Value: float64(i), Label: name})
		if n > overlapNumbersMaxRules {
			continue
		}
		for j := range n {
			lab.XYs = append(lab.XYs, plotter.XY{X: float64(i), Y: float64(j)})
			lab.Labels = append(lab.Labels, fmt.Sprintf("%.2f", ov.PassedFraction[i][j]))
		}
	}
	p.X.Tick.Marker, p.Y.Tick.Marker = plot.ConstantTicks(ticks), plot.ConstantTicks(ticks)
	p.X.Tick.Label.Rotation = math.Pi / 2
	p.X.Tick.Label.XAlign, p.X.Tick.Label.YAlign = -1, -0.5
	p.X.Min, p.X.Max, p.Y.Min, p.Y.Max = -0.5, float64(n)-0.5, -0.5, float64(n)-0.5
	if len(lab.XYs) == 0 {
		return p
	}
	if labels, err := plotter.NewLabels(lab); err == nil {
		for i := range labels.TextStyle {
			labels.TextStyle[i].Font.Size = vg.Points(7)
			labels.TextStyle[i].XAlign, labels.TextStyle[i].YAlign = -0.5, -0.5
			c, row := i/n, i%n
			if ov.PassedFraction[c][row] > 0.55 {
				labels.TextStyle[i].Color = colourLabelOn
			}
		}
		p.Add(labels)
	}
	return p
}

// riseX is where an efficiency rises: the fit's 50% point, or else the
// centre of the first bin at or above half the highest efficiency
// measured (the range's low end when no bin has events).
func riseX(ef *Efficiency) float64 {
	if ef.Fit != nil {
		return ef.Fit.X50
	}
	top := 0.0
	for _, b := range ef.Bins {
		if b.Efficiency != nil {
			top = math.Max(top, *b.Efficiency)
		}
	}
	for _, b := range ef.Bins {
		if b.Efficiency != nil && top > 0 && *b.Efficiency >= top/2 {
			return (b.Lo + b.Hi) / 2
		}
	}
	if len(ef.Bins) > 0 {
		return ef.Bins[0].Lo
	}
	return 0
}

func turnOnPlot(ef *Efficiency, cl float64) *plot.Plot {
	unit := ""
	if ef.Unit != "" {
		unit = " [" + ef.Unit + "]"
	}
	p := newPlot(fmt.Sprintf("efficiency of %s vs %s", ef.Rule, ef.Reference), ef.Reference+unit, "efficiency")
	p.Y.Min, p.Y.Max = 0, 1.08
	var pts errPoints
	for _, b := range ef.Bins {
		if b.Efficiency == nil {
			continue
		}
		x, e := (b.Lo+b.Hi)/2, *b.Efficiency
		pts.XYs = append(pts.XYs, plotter.XY{X: x, Y: e})
		pts.YErrors = append(pts.YErrors, struct{ Low, High float64 }{e - *b.Lower, *b.Upper - e})
		pts.XErrors = append(pts.XErrors, struct{ Low, High float64 }{x - b.Lo, b.Hi - x})
	}
	if len(pts.XYs) > 0 {
		sct, _ := plotter.NewScatter(pts.XYs)
		sct.GlyphStyle.Color, sct.GlyphStyle.Radius, sct.GlyphStyle.Shape = colourPoints, vg.Points(2.2), draw.CircleGlyph{}
		ybars, _ := plotter.NewYErrorBars(pts)
		ybars.LineStyle.Color = colourPoints
		xbars, _ := plotter.NewXErrorBars(pts)
		xbars.LineStyle.Color, xbars.CapWidth = colourPoints, 0
		p.Add(ybars, xbars, sct)
		p.Legend.Add(fmt.Sprintf("data, %.0f%% Clopper-Pearson intervals", 100*cl), sct)
	}
	if f := ef.Fit; f != nil {
		plateau := fmt.Sprintf("%.3f±%.3f", f.Plateau, f.PlateauErr)
		if f.PlateauFixed {
			plateau = "1 (at the limit)"
		}
		curve := plotter.NewFunction(func(x float64) float64 { return stats.TurnOn(x, f.X50, f.Sigma, f.Plateau) })
		curve.LineStyle.Color, curve.LineStyle.Width = colourFit, vg.Points(1.5)
		curve.Samples = 400
		p.Add(curve)
		u := unitSuffix(ef.Unit)
		quality := ""
		if f.PValue != nil {
			quality = fmt.Sprintf(", p = %.2g", *f.PValue)
			if *f.PValue < poorFitP {
				quality += " (POOR FIT)"
			}
		}
		p.Legend.Add(fmt.Sprintf("fit: 50%% at %.4g±%.2g%s, width %.3g±%.2g%s, plateau %s%s", f.X50, f.X50Err, u, f.Sigma, f.SigmaErr, u, plateau, quality), curve)
		half := plotter.NewFunction(func(float64) float64 { return f.Plateau / 2 })
		half.LineStyle.Color, half.LineStyle.Dashes = colourGuide, []vg.Length{vg.Points(3), vg.Points(3)}
		p.Add(half)
	}
	if len(ef.Bins) > 0 {
		p.X.Min, p.X.Max = ef.Bins[0].Lo, ef.Bins[len(ef.Bins)-1].Hi
	}
	// The legend goes where a rising efficiency leaves room: below the
	// plateau on the right when the rise lies in the left half of the
	// range, above the foot on the left otherwise (always the top left
	// ran into the plateau of an early rise).
	if riseX(ef) < (p.X.Min+p.X.Max)/2 {
		p.Legend.Top, p.Legend.Left = false, false
		p.Legend.XOffs, p.Legend.YOffs = vg.Points(-8), vg.Points(10)
	} else {
		p.Legend.Top, p.Legend.Left = true, true
		p.Legend.XOffs, p.Legend.YOffs = vg.Points(8), vg.Points(-6)
	}
	return p
}
