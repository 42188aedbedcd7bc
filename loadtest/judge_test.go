package loadtest

import (
	"context"
	"encoding/json"
	"errors"
	"slices"
	"strings"
	"testing"
	"time"
)

// A step interrupted part way still closes its accounting (the feed sends
// its end markers); it must fail, never stand as the saturation point,
// and Run must say the test was interrupted.
func TestInterruptedStepFails(t *testing.T) {
	ds, nw := testRig(t, GenerateConfig{Crossings: 3000, Seed: 2})
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	// Cancel 300 ms into the measured step: the hook runs after the
	// warm-up, just before the steps.
	instrument := func() (func(), error) {
		time.AfterFunc(300*time.Millisecond, cancel)
		return func() {}, nil
	}
	rep, err := Run(ctx, Config{Dataset: ds, Origin: "test", Network: nw, Rates: []float64{2000}, Duration: 3 * time.Second, Instrument: instrument})
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("Run after the interruption: %v, want it to say so", err)
	}
	if len(rep.Steps) != 1 || rep.Steps[0].Pass || !strings.Contains(rep.Steps[0].Reason, "interrupted") || rep.Saturation != nil {
		t.Fatalf("steps %+v, saturation %v: want one failed, interrupted step and no saturation", rep.Steps, rep.Saturation)
	}
	if st := rep.Steps[0]; st.CrossingsPlanned != 6000 || st.Account.CrossingsOffered >= 6000 {
		t.Fatalf("planned %d, offered %d", st.CrossingsPlanned, st.Account.CrossingsOffered)
	}
}

// judge fails a step for each way it did not keep up, and says which.
func TestJudgeReasons(t *testing.T) {
	good := Step{OfferedHz: 1000, AchievedOfferHz: 1000, Latency: LatencyMs{P99: 5},
		Account: Accounting{CrossingsOffered: 100, EventsBuilt: 100, EventsDecided: 100, FragmentsOffered: 1600, FragmentsReceived: 1600, FragmentsInEvents: 1600}}
	if ok, why := judge(good, 20*time.Millisecond); !ok {
		t.Fatalf("a good step failed: %s", why)
	}
	for _, tc := range []struct {
		name   string
		change func(*Step)
		reason string
	}{
		{"error", func(s *Step) { s.Error = "interrupted: offered 10 of 100 crossings" }, "interrupted"},
		{"undecodable", func(s *Step) { s.Account.FragmentBatchesUndecodable = 1 }, "1 fragment batches undecodable"},
		{"incomplete", func(s *Step) { s.Account.EventsIncomplete = 1; s.Account.FragmentsInEvents = 1590 }, "1 events incomplete, 10 fragments not in events"},
		{"lost", func(s *Step) { s.Account.EventsDecided, s.Account.EventsLost = 98, 2 }, "2 events lost"},
		{"latency", func(s *Step) { s.Latency.P99 = 25 }, "p99 25.0 ms > 20 ms"},
		{"rate", func(s *Step) { s.AchievedOfferHz = 900 }, "offered only 900/s"},
		{"feed stall", func(s *Step) { s.FeedBehindMs = 60 }, "feed 60.0 ms behind schedule"},
	} {
		st := good
		tc.change(&st)
		ok, why := judge(st, 20*time.Millisecond)
		if ok || !strings.Contains(why, tc.reason) {
			t.Errorf("%s: pass %v, reason %q; want a failure saying %q", tc.name, ok, why, tc.reason)
		}
	}
}

// The run standing for a baseline is the fastest that dropped nothing.
func TestBetterBaselinePrefersRunsWithoutDrops(t *testing.T) {
	fastDropped := &Baseline{CrossingsPerS: 900, Dropped: 3}
	slow, fast := &Baseline{CrossingsPerS: 500}, &Baseline{CrossingsPerS: 700}
	var best *Baseline
	for _, b := range []*Baseline{fastDropped, slow, fast} {
		if betterBaseline(b, best) {
			best = b
		}
	}
	if best != fast {
		t.Fatalf("chose %+v, want the fastest run without drops", best)
	}
	if !betterBaseline(fastDropped, nil) || betterBaseline(fastDropped, slow) {
		t.Fatal("a run with drops stands only when no run without them exists")
	}
}

// A step failing at or below the saturation's rate is reported, with the
// highest rate up to which every step passed (steady, -1: not reported);
// a sweep failing only above it is not flagged.
func TestSaturationFlagsFailuresBelowIt(t *testing.T) {
	step := func(hz float64, pass bool) Step { return Step{OfferedHz: hz, Pass: pass} }
	for _, tc := range []struct {
		name   string
		steps  []Step
		sat    float64
		below  []float64
		steady float64
	}{
		{"monotonic", []Step{step(40, true), step(80, true), step(120, false)}, 80, nil, -1},
		{"one dip", []Step{step(40, true), step(80, false), step(120, true), step(160, false)}, 120, []float64{80}, 40},
		{"first failed", []Step{step(80, false), step(120, true), step(160, true)}, 160, []float64{80}, 0},
		{"as fast as possible ignored", []Step{step(0, false), step(40, true)}, 40, nil, -1},
		{"none passed", []Step{step(40, false)}, 0, nil, -1},
		// A refine or half-rate step run again at the saturation's rate.
		{"saturation rate failed once", []Step{step(100, true), step(200, false), step(200, true)}, 200, []float64{200}, 100},
		{"saturation rate failed, passing first", []Step{step(100, true), step(200, true), step(200, false)}, 200, []float64{200}, 100},
	} {
		rep := &Report{Steps: tc.steps}
		setSaturation(rep)
		var sat float64
		if rep.Saturation != nil {
			sat = rep.Saturation.OfferedHz
		}
		steady := -1.0
		if rep.SteadyHz != nil {
			steady = *rep.SteadyHz
		}
		if sat != tc.sat || !slices.Equal(rep.FailedBelow, tc.below) || steady != tc.steady {
			t.Errorf("%s: saturation %v, failed below %v, steady %v; want %v, %v, %v", tc.name, sat, rep.FailedBelow, steady, tc.sat, tc.below, tc.steady)
		}
		// The JSON says steady_hz whenever a step failed below, 0
		// included, and leaves it out otherwise.
		js, err := json.Marshal(rep)
		if err != nil {
			t.Fatal(err)
		}
		if has := strings.Contains(string(js), `"steady_hz":`); has != (tc.steady >= 0) {
			t.Errorf("%s: steady_hz in the JSON %v, want %v", tc.name, has, tc.steady >= 0)
		}
		var out strings.Builder
		rep.Print(&out)
		if warned := strings.Contains(out.String(), "below the saturation failed"); warned != (len(tc.below) > 0) {
			t.Errorf("%s: warning printed %v, want %v:\n%s", tc.name, warned, len(tc.below) > 0, out.String())
		}
	}
}
