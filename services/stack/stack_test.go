package stack

import (
	"context"
	"io"
	"net/http"
	"strings"
	"testing"
	"time"

	"github.com/bunchsieve/bunchsieve/services/emulator"
	"github.com/bunchsieve/bunchsieve/services/runconfig"
)

func newStack(t *testing.T, crossings uint64, rate float64) *Stack {
	t.Helper()
	rc := runconfig.Default()
	rc.RateHz = rate
	st, err := New(Options{Run: rc, Crossings: crossings, MetricsAddr: "127.0.0.1:0"})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(st.Close)
	return st
}

// The accounting of `up` closes exactly: every crossing offered is built
// once, every fragment lands in exactly one bucket, and every rule keeps
// floor(passed / prescale) events (counter-based prescale).
func TestUpAccountingCloses(t *testing.T) {
	st := newStack(t, 12000, 0)
	sum, err := st.Run(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if sum.Crossings != 12000 {
		t.Fatalf("crossings %d, want 12000", sum.Crossings)
	}
	if sum.EventsBuilt != sum.Crossings || sum.EventsDecided != sum.Crossings {
		t.Fatalf("built %d, decided %d, crossings %d", sum.EventsBuilt, sum.EventsDecided, sum.Crossings)
	}
	if !sum.Fragments.Closed() {
		t.Fatalf("fragment accounting open: %+v", sum.Fragments)
	}
	if want := sum.Crossings * uint64(sum.Sources); sum.Fragments.Received != want || sum.Fragments.InEvents != want {
		t.Fatalf("fragments %+v, want %d received and in events", sum.Fragments, want)
	}
	if len(sum.Rules) == 0 || sum.MenuHash == "" {
		t.Fatalf("no rules or menu hash in summary: %+v", sum)
	}
	anyPassed := false
	for _, r := range sum.Rules {
		if r.Prescale > 0 && r.Accepted != r.Passed/uint64(r.Prescale) {
			t.Errorf("rule %s: passed %d, prescale %d, accepted %d", r.Name, r.Passed, r.Prescale, r.Accepted)
		}
		anyPassed = anyPassed || r.Passed > 0
	}
	if !anyPassed || sum.Accepted == 0 {
		t.Errorf("no rule passed in %d crossings: the example menu and the generator do not meet", sum.Crossings)
	}
}

// While the stack runs, /metrics serves the bunchsieve_ series of every
// stage.
func TestMetricsWhileRunning(t *testing.T) {
	st := newStack(t, 0, 4000)
	stop, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() {
		_, err := st.Run(stop)
		done <- err
	}()
	want := []string{
		`bunchsieve_builder_fragments_received_total{builder="0",source="1"}`,
		`bunchsieve_builder_events_built_total{builder="0",completeness="complete"}`,
		`bunchsieve_selection_rule_passed_total{rule=`,
		`bunchsieve_selection_rule_accepted_total{rule=`,
		`bunchsieve_builder_build_latency_seconds_bucket`,
		`bunchsieve_selection_latency_seconds_bucket`,
		`bunchsieve_readout_crossings_total`,
	}
	deadline := time.Now().Add(20 * time.Second)
	var body string
	for time.Now().Before(deadline) {
		resp, err := http.Get(st.MetricsURL())
		if err == nil {
			b, _ := io.ReadAll(resp.Body)
			resp.Body.Close()
			body = string(b)
			if hasAll(body, want) && !strings.Contains(body, "bunchsieve_selection_decisions_total 0\n") {
				break
			}
		}
		time.Sleep(50 * time.Millisecond)
	}
	cancel()
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	for _, w := range want {
		if !strings.Contains(body, w) {
			t.Errorf("/metrics lacks %s", w)
		}
	}
}

func hasAll(s string, subs []string) bool {
	for _, w := range subs {
		if !strings.Contains(s, w) {
			return false
		}
	}
	return true
}

// With 5% drops, 5% duplicates and 1% corrupted fragments injected, the
// accounting still closes exactly and the counts per reason match what was
// injected.
func TestFaultInjectionAccounting(t *testing.T) {
	rc := runconfig.Default()
	rc.RateHz = 0
	rc.Faults = []emulator.Fault{{Drop: 0.05, Duplicate: 0.05, Corrupt: 0.01}}
	st, err := New(Options{Run: rc, Crossings: 5000})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	sum, err := st.Run(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	inj := st.chain.emu.Injected()
	total := sum.Crossings * uint64(sum.Sources)
	t.Logf("injected %+v; fragments %+v", inj, sum.Fragments)
	// Each fraction should be close to what was asked: 5000 x 16 fragments,
	// so 5% is 4000 +- 63 (binomial sigma); allow 5 sigma.
	near := func(name string, got uint64, frac float64) {
		want := frac * float64(total)
		if d := float64(got) - want; d*d > 25*want {
			t.Errorf("%s injected %d, want about %.0f", name, got, want)
		}
	}
	near("drops", inj.Dropped, 0.05)
	near("duplicates", inj.Duplicated, 0.05)
	near("corruptions", inj.Corrupted, 0.01)
	f := sum.Fragments
	if !f.Closed() {
		t.Fatalf("accounting open: %+v", f)
	}
	if f.Received != total-inj.Dropped+inj.Duplicated {
		t.Errorf("received %d, want %d - %d dropped + %d duplicated", f.Received, total, inj.Dropped, inj.Duplicated)
	}
	if f.Duplicate != inj.Duplicated || f.Malformed != inj.Corrupted || f.Late != 0 || f.OutOfTime != 0 || f.UnknownSource != 0 {
		t.Errorf("reasons %+v, want duplicate %d, malformed %d, nothing else", f, inj.Duplicated, inj.Corrupted)
	}
	if f.InEvents != total-inj.Dropped-inj.Corrupted {
		t.Errorf("in events %d, want %d - %d - %d", f.InEvents, total, inj.Dropped, inj.Corrupted)
	}
	if sum.EventsBuilt != sum.Crossings || sum.EventsIncomplete == 0 {
		t.Errorf("built %d of %d crossings, %d incomplete", sum.EventsBuilt, sum.Crossings, sum.EventsIncomplete)
	}
}

// With policy block, a source that stops sending for a stretch makes the
// window fill: the builder holds the other sources' fragments back until
// the silent source is declared dead, and then builds every crossing. The
// accounting closes and no crossing is lost (the service used to drop the
// fragments it was refused, uncounted).
func TestBlockPolicyStalledSource(t *testing.T) {
	rc := runconfig.Default()
	rc.RateHz = 0
	rc.Builder.WhenFull = "block"
	// A short window fills within 100 crossings of the stall, a few ms
	// (tens under the race detector), long before source 5 is declared
	// dead; the short lateness keeps the window from filling otherwise.
	rc.Builder.Lateness = time.Microsecond
	rc.Builder.Window = 100
	rc.Builder.DeadAfter = time.Second
	// Source 5 sends nothing for 12,000 crossings: more than the window.
	rc.Faults = []emulator.Fault{{Sources: []uint32{5}, StallFrom: 2000, StallTo: 14000}}
	st, err := New(Options{Run: rc, Crossings: 20000})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	sum, err := st.Run(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	f := sum.Fragments
	if !f.Closed() || f.Received != sum.Crossings*uint64(sum.Sources)-12000 {
		t.Fatalf("fragments %+v, want %d received and the accounting closed", f, sum.Crossings*uint64(sum.Sources)-12000)
	}
	// The stalled crossings lack source 5; so may a few more: those built
	// while it was dead, whose source 5 fragments then came late, and,
	// when the held fragments reach their limit, evicted ones whose late
	// fragments are counted late.
	if sum.EventsBuilt != sum.Crossings || sum.EventsIncomplete < 12000 || sum.EventsDecided != sum.Crossings {
		t.Fatalf("built %d (%d incomplete), decided %d of %d crossings, %d late fragments; want every crossing built and decided once, at least the 12,000 stalled ones incomplete",
			sum.EventsBuilt, sum.EventsIncomplete, sum.EventsDecided, sum.Crossings, f.Late)
	}
	if r := st.chain.asm.Stats().WindowFullRefusals; r == 0 {
		t.Fatal("the window never filled: the test does not test block")
	}
}
