package report

import (
	"bytes"
	"image"
	"image/color"
	"image/png"
	"os"
	"path/filepath"
	"testing"
)

// The overlap map is drawn whole: nothing of it touches the border of
// the image, so no column or row label is cut off. A cell drawn up to the
// edge would colour the outermost pixels; they are all the background.
func TestOverlapPlotFitsTheImage(t *testing.T) {
	m, src := starter(t)
	rep := run(t, toySource(t, 4, 400), Options{Menu: m, MenuSource: src})
	dir := t.TempDir()
	if err := rep.WritePlots(dir); err != nil {
		t.Fatal(err)
	}
	data, err := os.ReadFile(filepath.Join(dir, "overlap.png"))
	if err != nil {
		t.Fatal(err)
	}
	img, err := png.Decode(bytes.NewReader(data))
	if err != nil {
		t.Fatal(err)
	}
	b := img.Bounds()
	white := func(p image.Point) bool {
		r, g, bl, _ := img.At(p.X, p.Y).RGBA()
		return color.RGBA64{R: uint16(r), G: uint16(g), B: uint16(bl), A: 0xffff} == color.RGBA64{R: 0xffff, G: 0xffff, B: 0xffff, A: 0xffff}
	}
	edges := map[string][]image.Point{}
	for x := b.Min.X; x < b.Max.X; x++ {
		edges["top"] = append(edges["top"], image.Pt(x, b.Min.Y))
		edges["bottom"] = append(edges["bottom"], image.Pt(x, b.Max.Y-1))
	}
	for y := b.Min.Y; y < b.Max.Y; y++ {
		edges["left"] = append(edges["left"], image.Pt(b.Min.X, y))
		edges["right"] = append(edges["right"], image.Pt(b.Max.X-1, y))
	}
	for side, pts := range edges {
		drawn := 0
		for _, p := range pts {
			if !white(p) {
				drawn++
			}
		}
		if drawn > 0 {
			t.Errorf("overlap.png: %d pixels of its %s edge are drawn on: the map does not fit the image", drawn, side)
		}
	}
}

// The turn-on plot's legend is placed by where the efficiency rises: the
// fit's 50% point, else the first bin at half the highest efficiency.
func TestRiseX(t *testing.T) {
	f := func(v float64) *float64 { return &v }
	bins := []EffBin{{Lo: 0, Hi: 10, Efficiency: f(0)}, {Lo: 10, Hi: 20}, {Lo: 20, Hi: 30, Efficiency: f(0.3)}, {Lo: 30, Hi: 40, Efficiency: f(0.8)}}
	// Half of the highest, 0.8, is 0.4: the bin at 0.3 is below it.
	if got := riseX(&Efficiency{Bins: bins}); got != 35 {
		t.Errorf("rise without a fit at %v, want 35", got)
	}
	if got := riseX(&Efficiency{Bins: bins, Fit: &ErfFit{X50: 31}}); got != 31 {
		t.Errorf("rise with a fit at %v, want its 50%% point 31", got)
	}
	if got := riseX(&Efficiency{Bins: []EffBin{{Lo: 5, Hi: 10}}}); got != 5 {
		t.Errorf("rise of empty bins at %v, want the range's low end 5", got)
	}
}
