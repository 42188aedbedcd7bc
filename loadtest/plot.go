package loadtest

import (
	"fmt"
	"image/color"
	"os"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
)

// The load-test plot's own colours.
var (
	colourThroughput = color.RGBA{R: 0x2b, G: 0x59, B: 0x8c, A: 0xff} // slate blue
	colourMedian     = color.RGBA{R: 0x3f, G: 0x8f, B: 0x5a, A: 0xff} // fern green
	colourTail       = color.RGBA{R: 0xb8, G: 0x4a, B: 0x2e, A: 0xff} // brick
	colourFarTail    = color.RGBA{R: 0x7a, G: 0x3b, B: 0x6e, A: 0xff} // plum
	colourCeiling    = color.RGBA{R: 0xd9, G: 0x9a, B: 0x1e, A: 0xff} // ochre
	colourGuide      = color.RGBA{R: 0x99, G: 0x99, B: 0x99, A: 0xff} // grey
)

// WritePNG draws throughput and latency against the offered rate, one
// panel above the other, into path (800 x 900 pixels). Steps offered as
// fast as possible have no offered rate and are left out.
func (r *Report) WritePNG(path string) error {
	var rates []Step
	for _, s := range r.Steps {
		if s.OfferedHz > 0 {
			rates = append(rates, s)
		}
	}
	if len(rates) == 0 {
		return fmt.Errorf("loadtest: no fixed-rate step to plot")
	}
	top, err := r.throughputPlot(rates)
	if err != nil {
		return err
	}
	bottom, err := r.latencyPlot(rates)
	if err != nil {
		return err
	}
	const dpi = 100
	w, h := 8*vg.Inch, 9*vg.Inch
	img := vgimg.NewWith(vgimg.UseWH(w, h), vgimg.UseDPI(dpi), vgimg.UseBackgroundColor(color.White))
	dc := draw.New(img)
	tiles := draw.Tiles{Rows: 2, Cols: 1, PadTop: vg.Points(6), PadBottom: vg.Points(6), PadX: vg.Points(6), PadY: vg.Points(14)}
	top.Draw(tiles.At(dc, 0, 0))
	bottom.Draw(tiles.At(dc, 0, 1))
	f, err := os.Create(path)
	if err != nil {
		return fmt.Errorf("loadtest: %w", err)
	}
	if _, err := (vgimg.PngCanvas{Canvas: img}).WriteTo(f); err != nil {
		f.Close()
		return fmt.Errorf("loadtest: %s: %w", path, err)
	}
	if err := f.Close(); err != nil {
		return fmt.Errorf("loadtest: %w", err)
	}
	return nil
}

func (r *Report) throughputPlot(steps []Step) (*plot.Plot, error) {
	p := plot.New()
	p.Title.Text = fmt.Sprintf("Throughput: %d source(s), %d builder(s), %d worker(s), %s", r.Dataset.Sources, r.Builders, r.Workers, r.Transport)
	p.X.Label.Text = "offered crossings per second"
	p.Y.Label.Text = "decided events per second"
	p.Add(plotter.NewGrid())
	maxRate := 0.0
	pts := make(plotter.XYs, len(steps))
	for i, s := range steps {
		pts[i] = plotter.XY{X: s.OfferedHz, Y: s.EventsPerS}
		maxRate = max(maxRate, s.OfferedHz, s.EventsPerS)
	}
	guide, err := plotter.NewLine(plotter.XYs{{X: 0, Y: 0}, {X: maxRate, Y: maxRate}})
	if err != nil {
		return nil, fmt.Errorf("loadtest: plot: %w", err)
	}
	guide.Color, guide.Dashes = colourGuide, []vg.Length{vg.Points(4), vg.Points(3)}
	p.Add(guide)
	p.Legend.Add("offered = decided", guide)
	line, points, err := plotter.NewLinePoints(pts)
	if err != nil {
		return nil, fmt.Errorf("loadtest: plot: %w", err)
	}
	line.Color, points.Color, points.Shape = colourThroughput, colourThroughput, draw.CircleGlyph{}
	p.Add(line, points)
	p.Legend.Add("pipeline", line, points)
	if b := r.Baseline; b != nil && b.CrossingsPerS > 0 && b.CrossingsPerS < 4*maxRate {
		c, err := plotter.NewLine(plotter.XYs{{X: 0, Y: b.CrossingsPerS}, {X: maxRate, Y: b.CrossingsPerS}})
		if err != nil {
			return nil, fmt.Errorf("loadtest: plot: %w", err)
		}
		c.Color, c.Dashes = colourCeiling, []vg.Length{vg.Points(6), vg.Points(3)}
		p.Add(c)
		p.Legend.Add(fmt.Sprintf("raw NATS, 1 hop (%.0f/s)", b.CrossingsPerS), c)
	}
	if s := r.Saturation; s != nil {
		sat, err := plotter.NewScatter(plotter.XYs{{X: s.OfferedHz, Y: s.EventsPerS}})
		if err != nil {
			return nil, fmt.Errorf("loadtest: plot: %w", err)
		}
		sat.Color, sat.Shape, sat.Radius = colourTail, draw.RingGlyph{}, vg.Points(7)
		p.Add(sat)
		p.Legend.Add(fmt.Sprintf("saturation (%.0f/s)", s.OfferedHz), sat)
	}
	p.Legend.Top, p.Legend.Left = false, false
	p.Legend.XOffs, p.Legend.YOffs = -vg.Points(8), vg.Points(8)
	p.X.Min, p.Y.Min = 0, 0
	return p, nil
}

func (r *Report) latencyPlot(steps []Step) (*plot.Plot, error) {
	p := plot.New()
	p.Title.Text = "End-to-end latency: readout publish to decision"
	p.X.Label.Text = "offered crossings per second"
	p.Y.Label.Text = "latency (ms)"
	p.Y.Scale = plot.LogScale{}
	p.Y.Tick.Marker = plot.LogTicks{Prec: -1}
	p.Add(plotter.NewGrid())
	floor := 0.01 // ms: a log axis needs positive values
	series := []struct {
		name string
		c    color.Color
		get  func(LatencyMs) float64
	}{
		{"p50", colourMedian, func(l LatencyMs) float64 { return l.P50 }},
		{"p99", colourTail, func(l LatencyMs) float64 { return l.P99 }},
		{"p99.9", colourFarTail, func(l LatencyMs) float64 { return l.P999 }},
	}
	maxRate, top := 0.0, r.P99BoundMs
	for _, s := range steps {
		maxRate = max(maxRate, s.OfferedHz)
		top = max(top, s.Latency.P999)
	}
	for _, se := range series {
		pts := make(plotter.XYs, len(steps))
		for i, s := range steps {
			pts[i] = plotter.XY{X: s.OfferedHz, Y: max(se.get(s.Latency), floor)}
		}
		line, points, err := plotter.NewLinePoints(pts)
		if err != nil {
			return nil, fmt.Errorf("loadtest: plot: %w", err)
		}
		line.Color, points.Color, points.Shape = se.c, se.c, draw.CircleGlyph{}
		p.Add(line, points)
		p.Legend.Add(se.name, line, points)
	}
	bound, err := plotter.NewLine(plotter.XYs{{X: 0, Y: r.P99BoundMs}, {X: maxRate, Y: r.P99BoundMs}})
	if err != nil {
		return nil, fmt.Errorf("loadtest: plot: %w", err)
	}
	bound.Color, bound.Dashes = colourGuide, []vg.Length{vg.Points(4), vg.Points(3)}
	p.Add(bound)
	p.Legend.Add(fmt.Sprintf("p99 bound (%.0f ms)", r.P99BoundMs), bound)
	p.Legend.Top, p.Legend.Left = true, true
	p.X.Min, p.Y.Max = 0, top*2
	return p, nil
}
