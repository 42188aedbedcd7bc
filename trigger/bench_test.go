package trigger

import (
	"math/rand/v2"
	"os"
	"testing"
)

// benchEvents returns events of 300 to 1000 towers, made before the timed
// loop.
func benchEvents(b *testing.B) []*Event {
	rng := rand.New(rand.NewPCG(2024, 7))
	evs := make([]*Event, 64)
	for i := range evs {
		evs[i] = syntheticEvent(rng, lanternGrid(), 300+rng.IntN(700), uint32(1+i/16))
	}
	return evs
}

func starterSelector(b *testing.B) *Selector {
	data, err := os.ReadFile(starterPath)
	if err != nil {
		b.Fatal(err)
	}
	m, err := ParseMenu(starterPath, data)
	if err != nil {
		b.Fatal(err)
	}
	return mustSelector(b, m)
}

func towersPerEvent(evs []*Event) float64 {
	n := 0
	for _, ev := range evs {
		n += len(ev.Towers)
	}
	return float64(n) / float64(len(evs))
}

func BenchmarkDecide(b *testing.B) {
	s := starterSelector(b)
	evs := benchEvents(b)
	var d Decision
	b.ReportAllocs()
	i := 0
	for b.Loop() {
		s.Decide(evs[i%len(evs)], &d)
		i++
	}
	b.ReportMetric(float64(i)/b.Elapsed().Seconds(), "events/s")
	b.ReportMetric(towersPerEvent(evs), "towers/event")
}

func BenchmarkDecideParallel(b *testing.B) {
	s := starterSelector(b)
	evs := benchEvents(b)
	b.ReportAllocs()
	b.ResetTimer()
	b.RunParallel(func(pb *testing.PB) {
		var d Decision
		i := 0
		for pb.Next() {
			s.Decide(evs[i%len(evs)], &d)
			i++
		}
	})
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "events/s")
}

func BenchmarkFeatures(b *testing.B) {
	s := starterSelector(b)
	cfg := s.cfg
	evs := benchEvents(b)
	var f Features
	b.ReportAllocs()
	i := 0
	for b.Loop() {
		ComputeFeatures(evs[i%len(evs)], cfg, &f)
		i++
	}
	b.ReportMetric(float64(i)/b.Elapsed().Seconds(), "events/s")
}

// BenchmarkRules times the rule evaluation alone, on features computed
// before the loop.
func BenchmarkRules(b *testing.B) {
	s := starterSelector(b)
	evs := benchEvents(b)
	fs := make([]Features, len(evs))
	for i, ev := range evs {
		s.ComputeFeatures(ev, &fs[i])
	}
	var d Decision
	b.ReportAllocs()
	i := 0
	for b.Loop() {
		s.DecideFeatures(&fs[i%len(fs)], 1, &d)
		i++
	}
	b.ReportMetric(float64(i)/b.Elapsed().Seconds(), "events/s")
}

func BenchmarkParseMenu(b *testing.B) {
	data, err := os.ReadFile(starterPath)
	if err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	b.SetBytes(int64(len(data)))
	for b.Loop() {
		if _, err := ParseMenu(starterPath, data); err != nil {
			b.Fatal(err)
		}
	}
}
