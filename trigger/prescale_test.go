package trigger

import (
	"sync"
	"testing"
)

// prescaleMenu has rules every event passes (sum ET >= 0 always holds),
// so that N events mean N passes.
const prescaleMenu = `
menu: prescale-check
version: 1
rules:
  every-7:   {when: "sumet >= 0 GeV", prescale: 7}
  every-3:   {when: "sumet >= 0 GeV", prescale: 3}
  every-1:   {when: "sumet >= 0 GeV"}
  pass-1000: {keep_fraction: 0.001}
  never:     {when: "sumet < 0 GeV"}
prescale_sets:
  nominal: {}
  quiet:   {every-7: 2, every-1: off}
streams:
  main: [every-7, every-3]
  side: [every-1]
`

func TestPrescaleKeepsEveryPth(t *testing.T) {
	s := mustSelector(t, mustParse(t, prescaleMenu))
	ev := &Event{LumiSlice: 1}
	var d Decision
	const n = 100
	for i := 1; i <= n; i++ {
		s.Decide(ev, &d)
		// The P-th, 2P-th, ... passes are kept.
		for r, p := range []int{7, 3, 1} {
			if want := i%p == 0; d.Kept[r] != want || !d.Passed[r] {
				t.Fatalf("pass %d, prescale %d: passed %v kept %v, want kept %v", i, p, d.Passed[r], d.Kept[r], want)
			}
		}
		if d.Passed[4] || d.Kept[4] {
			t.Fatalf("pass %d: rule never passed", i)
		}
		wantStreams := []string{"side"}
		if i%7 == 0 || i%3 == 0 {
			wantStreams = []string{"main", "side"}
		}
		if len(d.Streams) != len(wantStreams) || d.Streams[0] != wantStreams[0] {
			t.Fatalf("pass %d: streams %v, want %v", i, d.Streams, wantStreams)
		}
	}
	want := []RuleCount{{"every-7", 7, n, n / 7}, {"every-3", 3, n, n / 3}, {"every-1", 1, n, n}, {"pass-1000", 1000, n, 0}, {"never", 1, 0, 0}}
	for i, c := range s.Counts() {
		if c != want[i] {
			t.Errorf("count %d: %+v, want %+v", i, c, want[i])
		}
	}
}

func TestPrescaleExactAcrossGoroutines(t *testing.T) {
	s := mustSelector(t, mustParse(t, prescaleMenu))
	const workers, perWorker = 8, 2503
	var mu sync.Mutex
	kept := make([]uint64, 4)
	var wg sync.WaitGroup
	for w := 0; w < workers; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			ev := &Event{LumiSlice: 3}
			var d Decision
			local := make([]uint64, 4)
			for i := 0; i < perWorker; i++ {
				s.Decide(ev, &d)
				for r := range local {
					if d.Kept[r] {
						local[r]++
					}
				}
			}
			mu.Lock()
			for r := range local {
				kept[r] += local[r]
			}
			mu.Unlock()
		}()
	}
	wg.Wait()
	const n = workers * perWorker // 20024 passes per rule
	for r, p := range []uint64{7, 3, 1, 1000} {
		if want := uint64(n) / p; kept[r] != want {
			t.Errorf("prescale %d: %d of %d kept by the decisions, want floor = %d", p, kept[r], n, want)
		}
		if c := s.Counts()[r]; c.Passed != n || c.Kept != uint64(n)/p {
			t.Errorf("prescale %d: counts %+v, want %d passed, %d kept", p, c, n, uint64(n)/p)
		}
	}
}

func TestKeepFractionRounding(t *testing.T) {
	// keep_fraction f is realised as prescale round(1/f), halves away from
	// zero: 0.3 -> 3.33 -> 3; 0.4 -> 2.5 -> 3; 0.001 -> 1000; 1 -> 1.
	for _, c := range []struct {
		f    string
		want int
	}{{"0.3", 3}, {"0.4", 3}, {"0.001", 1000}, {"1", 1}, {"0.6", 2}} {
		m := mustParse(t, "menu: k\nversion: 1\nrules:\n  keep: {keep_fraction: "+c.f+"}\n")
		if p := m.Rules[0].Prescale; p != c.want || !m.Rules[0].PassThrough() {
			t.Errorf("keep_fraction %s: prescale %d, want %d", c.f, p, c.want)
		}
	}
}

func TestPrescaleSetSwitchAtLumiBoundary(t *testing.T) {
	s := mustSelector(t, mustParse(t, prescaleMenu))
	var d Decision
	decide := func(slice uint32) Decision {
		s.Decide(&Event{LumiSlice: slice}, &d)
		return d
	}
	for i := 0; i < 5; i++ {
		if d := decide(1); d.PrescaleSet != "nominal" {
			t.Fatalf("slice 1 event %d: set %q, want nominal", i, d.PrescaleSet)
		}
	}
	// The switch is requested while slice 1 is in force.
	if err := s.SetPrescaleSet("quiet"); err != nil {
		t.Fatal(err)
	}
	if st := s.PrescaleStatus(); st != (PrescaleStatus{Set: "nominal", Slice: 1, Pending: "quiet", PendingFrom: 2}) {
		t.Fatalf("status %+v", st)
	}
	// No earlier: the rest of slice 1 keeps the old set.
	for i := 0; i < 3; i++ {
		if d := decide(1); d.PrescaleSet != "nominal" || !d.Kept[2] {
			t.Fatalf("slice 1 after the request: set %q, every-1 kept %v; want nominal, true", d.PrescaleSet, d.Kept[2])
		}
	}
	// No later: the first event of slice 2 uses the new set, in which
	// every-1 is off (passes, not kept) and every-7 has prescale 2 counted
	// afresh from the switch.
	d2 := decide(2)
	if d2.PrescaleSet != "quiet" || !d2.Passed[2] || d2.Kept[2] || d2.Kept[0] {
		t.Fatalf("first event of slice 2: set %q, every-1 passed %v kept %v, every-7 kept %v", d2.PrescaleSet, d2.Passed[2], d2.Kept[2], d2.Kept[0])
	}
	if d := decide(2); d.PrescaleSet != "quiet" || !d.Kept[0] {
		t.Fatalf("second event of slice 2: set %q, every-7 kept %v; want quiet, true (2nd pass at prescale 2)", d.PrescaleSet, d.Kept[0])
	}
	// A late event of slice 1, decided after slice 2 began, keeps the set of
	// its own slice.
	if d := decide(1); d.PrescaleSet != "nominal" {
		t.Fatalf("late slice 1 event: set %q, want nominal", d.PrescaleSet)
	}
	if st := s.PrescaleStatus(); st != (PrescaleStatus{Set: "quiet", Slice: 2}) {
		t.Fatalf("status %+v", st)
	}
	if c := s.Counts()[2]; c.Prescale != 0 {
		t.Fatalf("every-1 prescale in force %d, want 0 (off)", c.Prescale)
	}
	if err := s.SetPrescaleSet("loud"); err == nil {
		t.Fatal("SetPrescaleSet accepted an unknown set")
	}
}

func TestPrescaleSetSwitchBeforeFirstEventIsImmediate(t *testing.T) {
	s := mustSelector(t, mustParse(t, prescaleMenu))
	if err := s.SetPrescaleSet(BaseSet); err != nil {
		t.Fatal(err)
	}
	var d Decision
	s.Decide(&Event{LumiSlice: 9}, &d)
	if d.PrescaleSet != BaseSet {
		t.Fatalf("set %q, want %q", d.PrescaleSet, BaseSet)
	}
}

func TestPrescaleSetSecondRequestReplacesPending(t *testing.T) {
	s := mustSelector(t, mustParse(t, prescaleMenu))
	var d Decision
	s.Decide(&Event{LumiSlice: 4}, &d)
	if err := s.SetPrescaleSet("quiet"); err != nil {
		t.Fatal(err)
	}
	if err := s.SetPrescaleSet(BaseSet); err != nil {
		t.Fatal(err)
	}
	s.Decide(&Event{LumiSlice: 4}, &d)
	if d.PrescaleSet != "nominal" {
		t.Fatalf("slice 4: %q, want nominal", d.PrescaleSet)
	}
	s.Decide(&Event{LumiSlice: 6}, &d)
	if d.PrescaleSet != BaseSet {
		t.Fatalf("slice 6: %q, want %q", d.PrescaleSet, BaseSet)
	}
}

// With many goroutines deciding events of slice 1 while the switch is
// requested, every slice 1 event uses the old set and every slice 2 event
// the new one, and each set's counts are exact.
func TestPrescaleSetSwitchConcurrent(t *testing.T) {
	s := mustSelector(t, mustParse(t, prescaleMenu))
	var d Decision
	s.Decide(&Event{LumiSlice: 1}, &d) // slice 1 is in force
	const workers, per = 8, 500
	var wg sync.WaitGroup
	bad := make(chan string, workers*2)
	var keptOld, keptNew [workers]int
	run := func(slice uint32, want string, kept *[workers]int) {
		for w := 0; w < workers; w++ {
			wg.Add(1)
			go func() {
				defer wg.Done()
				var d Decision
				for i := 0; i < per; i++ {
					s.Decide(&Event{LumiSlice: slice}, &d)
					if d.PrescaleSet != want {
						bad <- d.PrescaleSet
						return
					}
					if d.Kept[0] {
						kept[w]++
					}
				}
			}()
		}
	}
	run(1, "nominal", &keptOld)
	if err := s.SetPrescaleSet("quiet"); err != nil {
		t.Fatal(err)
	}
	wg.Wait()
	run(2, "quiet", &keptNew)
	wg.Wait()
	close(bad)
	for set := range bad {
		t.Fatalf("an event used set %q", set)
	}
	sum := func(k [workers]int) (n int) {
		for _, x := range k {
			n += x
		}
		return n
	}
	// every-7: 1 + 4000 passes under nominal (prescale 7), 4000 under quiet
	// (prescale 2, counted from the switch).
	if o, n := sum(keptOld), sum(keptNew); o != (1+workers*per)/7 || n != workers*per/2 {
		t.Fatalf("kept %d under nominal, %d under quiet; want %d and %d", o, n, (1+workers*per)/7, workers*per/2)
	}
}
