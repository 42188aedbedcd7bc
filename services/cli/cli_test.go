package cli

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats-server/v2/server"

	"github.com/bunchsieve/bunchsieve/services/summary"
	"github.com/bunchsieve/bunchsieve/services/transport"
	"github.com/bunchsieve/bunchsieve/services/transport/natsproc"
)

// runCLI runs the command line in-process with a deadline, so a hang fails
// the test instead of stalling it.
func runCLI(t *testing.T, timeout time.Duration, args ...string) (code int, stdout, stderr string) {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), timeout)
	defer cancel()
	var out, errb bytes.Buffer
	done := make(chan int, 1)
	go func() { done <- run(ctx, args, &out, &errb) }()
	select {
	case code = <-done:
	case <-time.After(timeout + 10*time.Second):
		t.Fatalf("bunchsieve %s did not return", strings.Join(args, " "))
	}
	return code, out.String(), errb.String()
}

func readSummary(t *testing.T, path string) summary.Summary {
	t.Helper()
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	var s summary.Summary
	if err := json.Unmarshal(data, &s); err != nil {
		t.Fatal(err)
	}
	return s
}

// Readout, build and select as separate services over one NATS server give
// exactly the decision counts of `up` for the same seed and crossings.
func TestSeparateServicesMatchUp(t *testing.T) {
	const crossings, seed = "6000", "11"
	dir := t.TempDir()
	upJSON := filepath.Join(dir, "up.json")
	if code, _, stderr := runCLI(t, time.Minute, "up", "--crossings", crossings, "--seed", seed, "--rate", "0",
		"--quiet", "--metrics-addr", "", "--summary-json", upJSON); code != 0 {
		t.Fatalf("up: exit %d: %s", code, stderr)
	}
	up := readSummary(t, upJSON)
	t.Run("one selection worker", func(t *testing.T) { separateServices(t, newTestServer(t), up, crossings, seed, 1) })
	t.Run("two selection workers", func(t *testing.T) { separateServices(t, newTestServer(t), up, crossings, seed, 2) })
	// The installed server program, of its own version, over TCP to a
	// process of its own: the services must not depend on the embedded one.
	t.Run("nats-server program", func(t *testing.T) { separateServices(t, newProgramServer(t), up, crossings, seed, 2) })
}

// separateServices runs readout, build and workers x select against one
// server and compares their summaries with up's. With several workers the
// events and passes add up to up's exactly; each worker prescales its own
// share, so a rule's kept count may differ by less than one per worker.
func separateServices(t *testing.T, srv *testServer, up summary.Summary, crossings, seed string, workers int) {
	dir := t.TempDir()
	url := srv.url

	var wg sync.WaitGroup
	results := map[string]int{}
	var mu sync.Mutex
	start := func(name string, args ...string) {
		wg.Add(1)
		go func() {
			defer wg.Done()
			code, _, stderr := runCLI(t, time.Minute, args...)
			mu.Lock()
			results[name] = code
			mu.Unlock()
			if code != 0 {
				t.Errorf("%s: exit %d: %s", name, code, stderr)
			}
		}()
	}
	buildJSON := filepath.Join(dir, "build.json")
	var selJSON []string
	for w := range workers {
		selJSON = append(selJSON, filepath.Join(dir, fmt.Sprintf("select-%d.json", w)))
		start(fmt.Sprint("select ", w), "select", "--nats", url, "--summary-json", selJSON[w],
			"--worker", fmt.Sprint(w), "--workers", fmt.Sprint(workers))
	}
	start("build", "build", "--nats", url, "--summary-json", buildJSON)
	// The builder subscribes once; a worker once, or three times when it
	// shares the events (events, end of run, the others' progress).
	subs := uint32(1 + 1)
	if workers > 1 {
		subs = uint32(1 + 3*workers)
	}
	srv.awaitSubscriptions(subs, "builder and selection")
	start("readout", "readout", "--nats", url, "--crossings", crossings, "--seed", seed, "--rate", "0")
	wg.Wait()
	if t.Failed() {
		return
	}
	build := readSummary(t, buildJSON)
	if build.EventsBuilt != up.EventsBuilt || build.Fragments != up.Fragments {
		t.Errorf("builder: %d events %+v; up: %d events %+v", build.EventsBuilt, build.Fragments, up.EventsBuilt, up.Fragments)
	}
	var decided, accepted uint64
	rules := make([]summary.Rule, len(up.Rules))
	for w, file := range selJSON {
		sel := readSummary(t, file)
		if sel.MenuHash != up.MenuHash || len(sel.Rules) != len(up.Rules) {
			t.Fatalf("select %d: menu %s with %d rules; up %s with %d", w, sel.MenuHash, len(sel.Rules), up.MenuHash, len(up.Rules))
		}
		if workers > 1 && sel.EventsDecided == 0 {
			t.Errorf("select %d decided nothing", w)
		}
		decided += sel.EventsDecided
		accepted += sel.Accepted
		for i, r := range sel.Rules {
			rules[i].Name, rules[i].Prescale = r.Name, r.Prescale
			rules[i].Passed += r.Passed
			rules[i].Accepted += r.Accepted
		}
	}
	if decided != up.EventsDecided {
		t.Errorf("select decided %d; up decided %d", decided, up.EventsDecided)
	}
	if workers == 1 && accepted != up.Accepted {
		t.Errorf("select accepted %d; up accepted %d", accepted, up.Accepted)
	}
	for i, r := range rules {
		u := up.Rules[i]
		if r.Name != u.Name || r.Prescale != u.Prescale || r.Passed != u.Passed {
			t.Errorf("rule %d: separate %+v, up %+v", i, r, u)
		}
		// floor(a/P) + floor(b/P) is floor((a+b)/P) or one less per
		// further worker.
		if r.Accepted > u.Accepted || u.Accepted-r.Accepted >= uint64(workers) {
			t.Errorf("rule %s: kept %d by %d workers, %d by up", r.Name, r.Accepted, workers, u.Accepted)
		}
	}
}

// Bad input to any flag gives one line naming the problem and a non-zero
// exit, never a panic or a hang.
func TestBadInputGivesOneLineError(t *testing.T) {
	dir := t.TempDir()
	unreadable := filepath.Join(dir, "no-such-menu.yaml")
	garbage := filepath.Join(dir, "garbage.yaml")
	if err := os.WriteFile(garbage, []byte("rules: [unclosed\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	// A server with JetStream but no capture stream to catch up from.
	js := newJetStreamTestServer(t).url
	state := filepath.Join(dir, "build.state")
	cases := []struct {
		args []string
		want string
	}{
		{[]string{"launch"}, "unknown command"},
		{[]string{"up", "--rate", "-5"}, "--rate"},
		{[]string{"up", "--rate", "fast"}, "rate"},
		{[]string{"up", "--sources", "0"}, "--sources"},
		{[]string{"up", "--duration", "-1s"}, "--duration"},
		{[]string{"up", "--crossings", "0"}, "--crossings"},
		{[]string{"up", "--menu", unreadable, "--duration", "1s"}, "no-such-menu.yaml"},
		{[]string{"up", "--menu", garbage, "--duration", "1s"}, "garbage.yaml"},
		{[]string{"up", "--metrics-addr", "nonsense"}, "--metrics-addr"},
		{[]string{"up", "--nats-listen", "0.0.0.0:4222"}, "loopback"},
		{[]string{"up", "--config", unreadable}, "no-such-menu.yaml"},
		{[]string{"up", "--no-such-flag"}, "no-such-flag"},
		{[]string{"up", "extra"}, "unexpected argument"},
		{[]string{"build", "--nats", "nats://127.0.0.1:1"}, "127.0.0.1:1"},
		{[]string{"select", "--nats", "nats://127.0.0.1:1"}, "127.0.0.1:1"},
		{[]string{"readout", "--nats", "nats://127.0.0.1:1", "--crossings", "10"}, "127.0.0.1:1"},
		{[]string{"build", "--instance", "2", "--builders", "2"}, "--instance"},
		{[]string{"readout", "--replay", "x.bss", "--rate", "5000", "--speed", "2"}, "give one"},
		{[]string{"readout", "--replay", "x.bss", "--rate", "-5"}, "--rate -5"},
		{[]string{"build", "--catch-up"}, "--catch-up needs --state"},
		{[]string{"build", "--state", state, "--catch-up-stream", "x"}, "--catch-up-stream without --catch-up"},
		{[]string{"build", "--nats", js, "--state", state, "--catch-up"}, "no stream bunchsieve_fragments"},
		{[]string{"build", "--nats", newTestServer(t).url, "--state", state, "--catch-up"}, "JetStream off"},
		{[]string{"select", "--worker", "2", "--workers", "2"}, "--worker"},
		{[]string{"select", "--workers", "0"}, "--worker"},
		{[]string{"menu"}, "menu check"},
		{[]string{"menu", "check"}, "FILE"},
		{[]string{"menu", "check", unreadable}, "no-such-menu.yaml"},
	}
	for _, c := range cases {
		code, _, stderr := runCLI(t, 20*time.Second, c.args...)
		lines := strings.Split(strings.TrimRight(stderr, "\n"), "\n")
		if code == 0 || len(lines) != 1 || !strings.Contains(stderr, c.want) || strings.Contains(stderr, "panic") {
			t.Errorf("bunchsieve %s: exit %d, stderr %q; want one line naming %q", strings.Join(c.args, " "), code, stderr, c.want)
		}
	}
}

func TestHelpAndVersion(t *testing.T) {
	if code, out, _ := runCLI(t, 5*time.Second, "help"); code != 0 || !strings.Contains(out, "up") {
		t.Errorf("help: exit %d, %q", code, out)
	}
	if code, out, _ := runCLI(t, 5*time.Second, "up", "--help"); code != 0 || !strings.Contains(out, "-duration") {
		t.Errorf("up --help: exit %d, %q", code, out)
	}
}

// testServer is a NATS server for one test, shut down at its end, with a
// way to wait until the services under test have subscribed (core NATS
// delivers only to subscriptions that exist): an embedded one, or the
// nats-server program run as a process of its own.
type testServer struct {
	t    *testing.T
	srv  *server.Server // nil for the program
	url  string
	subs func() (uint32, error)
	base uint32
}

func newTestServer(t *testing.T) *testServer {
	t.Helper()
	return embeddedTestServer(t, transport.EmbeddedOptions{Port: -1})
}

// newJetStreamTestServer is newTestServer with JetStream on a store of
// the test's own.
func newJetStreamTestServer(t *testing.T) *testServer {
	t.Helper()
	return embeddedTestServer(t, transport.EmbeddedOptions{Port: -1, StoreDir: t.TempDir(), MaxStore: 256 << 20})
}

func embeddedTestServer(t *testing.T, o transport.EmbeddedOptions) *testServer {
	t.Helper()
	srv, err := transport.EmbeddedWith(o)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { srv.Shutdown(); srv.WaitForShutdown() })
	return &testServer{t: t, srv: srv, url: srv.ClientURL(), subs: func() (uint32, error) { return srv.NumSubscriptions(), nil },
		base: srv.NumSubscriptions()}
}

// newProgramServer runs the nats-server program for t (skipping t without
// it, see natsproc).
func newProgramServer(t *testing.T) *testServer {
	t.Helper()
	p := natsproc.Start(t)
	t.Logf("%s at %s", p.Version, p.URL)
	base, err := p.Subscriptions()
	if err != nil {
		t.Fatal(err)
	}
	return &testServer{t: t, url: p.URL, subs: p.Subscriptions, base: base}
}

// awaitSubscriptions waits up to 10 s until n subscriptions more than at
// the start exist; who names the subscribers in the failure.
func (s *testServer) awaitSubscriptions(n uint32, who string) {
	s.t.Helper()
	deadline := time.Now().Add(10 * time.Second)
	for {
		have, err := s.subs()
		if err == nil && have >= s.base+n {
			return
		}
		if time.Now().After(deadline) {
			s.t.Fatalf("%s did not subscribe (the server holds %d subscriptions, %d before it started, want %d more; %v)", who, have, s.base, n, err)
		}
		time.Sleep(5 * time.Millisecond)
	}
}

// startChain starts select and build against a fresh in-process server and
// returns its URL and a wait function giving their summaries.
func startChain(t *testing.T, dir string) (url string, wait func() (sel, build summary.Summary)) {
	t.Helper()
	srv := newTestServer(t)
	url = srv.url
	selJSON, buildJSON := filepath.Join(dir, "select.json"), filepath.Join(dir, "build.json")
	var wg sync.WaitGroup
	for _, args := range [][]string{
		{"select", "--nats", url, "--summary-json", selJSON},
		{"build", "--nats", url, "--summary-json", buildJSON},
	} {
		wg.Add(1)
		go func() {
			defer wg.Done()
			if code, _, stderr := runCLI(t, time.Minute, args...); code != 0 {
				t.Errorf("%s: exit %d: %s", args[0], code, stderr)
			}
		}()
	}
	srv.awaitSubscriptions(2, "builder and selection")
	return url, func() (summary.Summary, summary.Summary) {
		wg.Wait()
		if t.Failed() {
			t.FailNow()
		}
		return readSummary(t, selJSON), readSummary(t, buildJSON)
	}
}

// A stream written by record and replayed with readout --replay gives
// exactly the summary of the generator run with the same seed.
func TestRecordReplayMatchesGenerator(t *testing.T) {
	dir := t.TempDir()
	stream := filepath.Join(dir, "run.bss")
	if code, out, stderr := runCLI(t, time.Minute, "record", "--crossings", "4000", "--seed", "5", "--out", stream); code != 0 {
		t.Fatalf("record: exit %d: %s %s", code, out, stderr)
	}
	upJSON := filepath.Join(dir, "up.json")
	if code, _, stderr := runCLI(t, time.Minute, "up", "--crossings", "4000", "--seed", "5", "--rate", "0",
		"--quiet", "--metrics-addr", "", "--summary-json", upJSON); code != 0 {
		t.Fatalf("up: exit %d: %s", code, stderr)
	}
	up := readSummary(t, upJSON)
	url, wait := startChain(t, dir)
	replayJSON := filepath.Join(dir, "replay.json")
	if code, _, stderr := runCLI(t, time.Minute, "readout", "--nats", url, "--replay", stream, "--speed", "max", "--summary-json", replayJSON); code != 0 {
		t.Fatalf("replay: exit %d: %s", code, stderr)
	}
	sel, build := wait()
	replay := readSummary(t, replayJSON)
	if replay.Crossings != up.Crossings || replay.Seed != up.Seed {
		t.Errorf("replay crossings %d seed %d; up %d %d", replay.Crossings, replay.Seed, up.Crossings, up.Seed)
	}
	if build.EventsBuilt != up.EventsBuilt || build.EventsComplete != up.EventsComplete || build.Fragments != up.Fragments {
		t.Errorf("replay built %d %+v; up %d %+v", build.EventsBuilt, build.Fragments, up.EventsBuilt, up.Fragments)
	}
	if sel.EventsDecided != up.EventsDecided || sel.Accepted != up.Accepted || len(sel.Rules) != len(up.Rules) {
		t.Fatalf("replay decided %d accepted %d; up %d %d", sel.EventsDecided, sel.Accepted, up.EventsDecided, up.Accepted)
	}
	for i := range sel.Rules {
		if sel.Rules[i] != up.Rules[i] {
			t.Errorf("rule %d: replay %+v, up %+v", i, sel.Rules[i], up.Rules[i])
		}
	}
}

// A corrupted and a truncated stream file each give a one-line error with
// the byte offset, and the batches before the damage are delivered.
func TestDamagedStreamReplay(t *testing.T) {
	dir := t.TempDir()
	stream := filepath.Join(dir, "run.bss")
	// Enough crossings for several 1 MiB frames, so damage late in the file
	// leaves whole frames before it.
	if code, _, stderr := runCLI(t, time.Minute, "record", "--crossings", "30000", "--seed", "9", "--out", stream); code != 0 {
		t.Fatalf("record: exit %d: %s", code, stderr)
	}
	data, err := os.ReadFile(stream)
	if err != nil {
		t.Fatal(err)
	}
	corrupt := append([]byte(nil), data...)
	corrupt[len(corrupt)*3/4] ^= 0x10
	for name, content := range map[string][]byte{"corrupted": corrupt, "truncated": data[:len(data)*3/4]} {
		t.Run(name, func(t *testing.T) {
			path := filepath.Join(dir, name+".bss")
			if err := os.WriteFile(path, content, 0o644); err != nil {
				t.Fatal(err)
			}
			sub := t.TempDir()
			url, wait := startChain(t, sub)
			code, _, stderr := runCLI(t, time.Minute, "readout", "--nats", url, "--replay", path, "--speed", "max")
			lines := strings.Split(strings.TrimRight(stderr, "\n"), "\n")
			if code == 0 || len(lines) != 1 || !strings.Contains(stderr, "byte offset") || !strings.Contains(stderr, name) {
				t.Fatalf("exit %d, stderr %q: want one line naming the damage and its byte offset", code, stderr)
			}
			_, build := wait()
			if build.Fragments.Received == 0 || build.EventsBuilt == 0 {
				t.Fatalf("no batch before the damage was delivered: %+v", build)
			}
			if !build.Fragments.Closed() {
				t.Errorf("accounting open after a damaged replay: %+v", build.Fragments)
			}
		})
	}
}
