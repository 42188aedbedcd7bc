package report

import (
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"testing"

	"go-hep.org/x/hep/groot"
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

// A basket that compresses only a little is stored and read back
// exactly, with groot's own reader. testdata/met-hard-to-compress.f64
// holds the MET values (little-endian float64) of a toy replay, 1,792
// events, whose basket groot's LZ4 path could not write ("buffer too
// short": it leaves too little room for output slightly larger than the
// input), which lost that replay's whole report; the values are filled
// into every feature branch.
func TestTreeOfHardToCompressValues(t *testing.T) {
	raw, err := os.ReadFile(filepath.Join("testdata", "met-hard-to-compress.f64"))
	if err != nil {
		t.Fatal(err)
	}
	want := make([]float64, len(raw)/8)
	for i := range want {
		want[i] = math.Float64frombits(binary.LittleEndian.Uint64(raw[8*i:]))
	}
	m, _ := starter(t)
	src := toySource(t, 3, 10)
	acc, cfg, err := newAccumulator(Options{Menu: m}, src.Sample())
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), ROOTFile)
	tw, err := newTreeWriter(path, acc, cfg.Values)
	if err != nil {
		t.Fatal(err)
	}
	ev := &replay.Event{Values: make([]float64, len(cfg.Values))}
	for i, v := range want {
		for k := range ev.Values {
			ev.Values[k] = v
		}
		ev.Orbit = uint64(i)
		if err := tw.fill(ev, make([]bool, acc.nRules), make([]bool, acc.nRules), false, 1); err != nil {
			t.Fatal(err)
		}
	}
	if err := tw.finish(&Report{}); err != nil {
		t.Fatalf("writing the tree: %v", err)
	}

	f, err := groot.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	obj, err := f.Get(TreeName)
	if err != nil {
		t.Fatal(err)
	}
	tree := obj.(rtree.Tree)
	if tree.Entries() != int64(len(want)) {
		t.Fatalf("%d entries, want %d", tree.Entries(), len(want))
	}
	name := branchName(cfg.Values[0].String())
	var v float64
	rd, err := rtree.NewReader(tree, []rtree.ReadVar{{Name: name, Value: &v}})
	if err != nil {
		t.Fatal(err)
	}
	defer rd.Close()
	err = rd.Read(func(ctx rtree.RCtx) error {
		if v != want[ctx.Entry] {
			return fmt.Errorf("entry %d: %s = %v, wrote %v", ctx.Entry, name, v, want[ctx.Entry])
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
}
