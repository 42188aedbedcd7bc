package trigger

import (
	"math/rand/v2"
	"reflect"
	"slices"
	"sync"
	"testing"
)

// checkAlgorithm runs an Algorithm through the contract every algorithm
// must keep: a stable schema, objects that match it, deterministic output,
// an Input left untouched, and no shared state between Outputs (run it
// with -race).
func checkAlgorithm(t *testing.T, alg Algorithm, g Grid) {
	t.Helper()
	if !reflect.DeepEqual(alg.Schema(), alg.Schema()) {
		t.Fatal("Schema changes between calls")
	}
	cfg := FeatureConfig{Grid: g, Collections: []CollectionConfig{{Name: "objs", Algorithm: alg}}}
	rng := rand.New(rand.NewPCG(7, 11))
	var events []*Event
	for i := 0; i < 20; i++ {
		events = append(events, syntheticEvent(rng, g, 50+rng.IntN(600), 1))
	}
	run := func(f *Features, ev *Event) []float64 {
		computeFeatures(ev, &cfg, f)
		return append(slices.Clone(f.colls[0].vals), f.outs[0].Scalars...)
	}
	// Reference results from a fresh Features per event.
	want := make([][]float64, len(events))
	for i, ev := range events {
		var f Features
		want[i] = run(&f, ev)
	}
	// A reused Features, and the Input left as it was given.
	var f Features
	for i, ev := range events {
		towers := slices.Clone(ev.Towers)
		computeFeatures(ev, &cfg, &f)
		in := f.in
		cells, touched, selected := slices.Clone(in.Cells), slices.Clone(in.Touched), slices.Clone(in.Selected)
		f.colls[0].Reset()
		clear(f.outs[0].Scalars)
		alg.Run(&f.in, &f.outs[0])
		if !slices.Equal(ev.Towers, towers) || !slices.Equal(in.Cells, cells) || !slices.Equal(in.Touched, touched) || !slices.Equal(in.Selected, selected) {
			t.Fatalf("event %d: Run modified its input", i)
		}
		if got := append(slices.Clone(f.colls[0].vals), f.outs[0].Scalars...); !slices.Equal(got, want[i]) {
			t.Fatalf("event %d: reused Features gave %v, fresh %v", i, got, want[i])
		}
	}
	// Concurrent use with one Output each.
	var wg sync.WaitGroup
	errs := make(chan int, 4)
	for w := 0; w < 4; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			var f Features
			for i, ev := range events {
				if got := run(&f, ev); !slices.Equal(got, want[i]) {
					errs <- i
					return
				}
			}
		}()
	}
	wg.Wait()
	close(errs)
	for i := range errs {
		t.Fatalf("event %d: concurrent run differs", i)
	}
}
