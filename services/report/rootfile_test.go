package report

import (
	"errors"
	"path/filepath"
	"testing"

	"go-hep.org/x/hep/groot/rtree"

	"github.com/bunchsieve/bunchsieve/services/report/replay"
)

// failingWriter is a tree writer that fails from its entry `after` on.
type failingWriter struct {
	rtree.Writer
	after, n int
}

var errBasket = errors.New("no room for the basket")

func (w *failingWriter) Write() (int, error) {
	if w.n++; w.n > w.after {
		return 0, errBasket
	}
	return w.Writer.Write()
}

// The tree is written on a goroutine of its own: an error there reaches
// the events filled after it and the end of the run, whichever batch it
// happened in, and nothing waits forever for the writing goroutine.
func TestTreeWriteErrorReachesTheRun(t *testing.T) {
	m, _ := starter(t)
	src := toySource(t, 3, 10)
	for _, c := range []struct{ after, events int }{{0, 1}, {100, 3000}, {treeBatchEvents, treeBatchEvents + 1}, {1000, 1001}} {
		acc, cfg, err := newAccumulator(Options{Menu: m}, src.Sample())
		if err != nil {
			t.Fatal(err)
		}
		tw, err := newTreeWriter(filepath.Join(t.TempDir(), ROOTFile), acc, cfg.Values)
		if err != nil {
			t.Fatal(err)
		}
		tw.w = &failingWriter{Writer: tw.w, after: c.after}
		passed, kept := make([]bool, acc.nRules), make([]bool, acc.nRules)
		ev := &replay.Event{Values: make([]float64, len(cfg.Values))}
		var fillErr error
		for i := 0; i < c.events && fillErr == nil; i++ {
			ev.Orbit = uint64(i)
			fillErr = tw.fill(ev, passed, kept, false, 1)
		}
		if fillErr != nil && !errors.Is(fillErr, errBasket) {
			t.Fatalf("failing after %d of %d: fill gave %v", c.after, c.events, fillErr)
		}
		if err := tw.finish(&Report{}); !errors.Is(err, errBasket) {
			t.Fatalf("failing after %d of %d: finish gave %v, want the writer's error", c.after, c.events, err)
		}
	}
	// And a tree that writes is finished without error, after an abort
	// of another as well.
	acc, cfg, _ := newAccumulator(Options{Menu: m}, src.Sample())
	for _, abort := range []bool{true, false} {
		tw, err := newTreeWriter(filepath.Join(t.TempDir(), ROOTFile), acc, cfg.Values)
		if err != nil {
			t.Fatal(err)
		}
		ev := &replay.Event{Values: make([]float64, len(cfg.Values))}
		for range 2*treeBatchEvents + 3 {
			if err := tw.fill(ev, make([]bool, acc.nRules), make([]bool, acc.nRules), true, 1); err != nil {
				t.Fatal(err)
			}
		}
		if abort {
			tw.abort()
			continue
		}
		if err := tw.finish(&Report{}); err != nil {
			t.Fatal(err)
		}
	}
}
