package cli

import (
	"context"
	"net"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"github.com/bunchsieve/bunchsieve/services/transport"
)

// A builder stopped in the middle of a run with --state and started again
// on the same file takes the run up: the selection, which never heard the
// run end, decides every event the two built between them, and no
// crossing is built twice. Without a capture stream the crossings whose
// fragments went out while neither ran are lost to core NATS, so the
// count is checked against the builders' own; with one and --catch-up
// the second builder builds them from the stream, and every crossing the
// readout sent is built and decided.
func TestBuildRestartsWithState(t *testing.T) {
	if testing.Short() {
		t.Skip("runs for about 6 s")
	}
	t.Run("lost to core NATS", func(t *testing.T) { buildRestarts(t, false) })
	t.Run("caught up from the capture", func(t *testing.T) { buildRestarts(t, true) })
}

func buildRestarts(t *testing.T, catchUp bool) {
	dir := t.TempDir()
	newServer := newTestServer
	if catchUp {
		newServer = newJetStreamTestServer
	}
	srv := newServer(t)
	var flags []string
	var stored func() uint64
	if catchUp {
		if code, out, errs := runCLI(t, time.Minute, "capture", "open", "--nats", srv.url, "--max-mib", "64"); code != 0 {
			t.Fatalf("capture open: exit %d\n%s%s", code, out, errs)
		}
		// The stream's own subscriptions are not the services'.
		var err error
		if srv.base, err = srv.subs(); err != nil {
			t.Fatal(err)
		}
		flags = []string{"--catch-up"}
		nc, err := transport.Connect(srv.url, "watch")
		if err != nil {
			t.Fatal(err)
		}
		defer nc.Close()
		js, err := jetstream.New(nc)
		if err != nil {
			t.Fatal(err)
		}
		stored = func() uint64 {
			st, err := js.Stream(context.Background(), "bunchsieve_fragments")
			if err != nil {
				t.Fatal(err)
			}
			return st.CachedInfo().State.Msgs
		}
	}
	state := filepath.Join(dir, "build.state")
	first, second, sel := filepath.Join(dir, "build-1.json"), filepath.Join(dir, "build-2.json"), filepath.Join(dir, "select.json")

	var wg sync.WaitGroup
	run := func(timeout time.Duration, args ...string) *string {
		var stderr string
		wg.Add(1)
		go func() {
			defer wg.Done()
			code, _, errText := runCLI(t, timeout, args...)
			stderr = errText
			if code != 0 {
				t.Errorf("%s: exit %d: %s", args[0], code, errText)
			}
		}()
		return &stderr
	}
	run(time.Minute, "select", "--nats", srv.url, "--summary-json", sel)
	// The first builder is stopped after a second, half way through.
	var firstDone sync.WaitGroup
	firstDone.Add(1)
	go func() {
		defer firstDone.Done()
		args := append([]string{"build", "--nats", srv.url, "--state", state, "--summary-json", first}, flags...)
		if code, _, stderr := runCLI(t, time.Second, args...); code != 0 {
			t.Errorf("first build: exit %d: %s", code, stderr)
		}
	}()
	srv.awaitSubscriptions(2, "builder and selection")
	run(time.Minute, "readout", "--nats", srv.url, "--crossings", "6000", "--seed", "3", "--rate", "3000")
	firstDone.Wait()
	if catchUp {
		// Let the readout go on alone for a while: what it sends now
		// reaches no builder, only the stream.
		atStop := stored()
		deadline := time.Now().Add(10 * time.Second)
		for stored() < atStop+200 && time.Now().Before(deadline) {
			time.Sleep(5 * time.Millisecond)
		}
	}
	secondErr := run(time.Minute, append([]string{"build", "--nats", srv.url, "--state", state, "--summary-json", second}, flags...)...)
	wg.Wait()
	if t.Failed() {
		return
	}
	if !strings.Contains(*secondErr, "taking up run") {
		t.Errorf("the second builder did not say it took the run up: %q", *secondErr)
	}
	b1, b2, s := readSummary(t, first), readSummary(t, second), readSummary(t, sel)
	built := b1.EventsBuilt + b2.EventsBuilt
	if b1.EventsBuilt == 0 || b2.EventsBuilt == 0 {
		t.Fatalf("built %d then %d: the stop did not fall within the run", b1.EventsBuilt, b2.EventsBuilt)
	}
	if built > 6000 || s.EventsDecided != built {
		t.Fatalf("built %d + %d, decided %d of 6000 crossings: want every built event decided once, none built twice", b1.EventsBuilt, b2.EventsBuilt, s.EventsDecided)
	}
	if catchUp {
		if built != 6000 || !strings.Contains(*secondErr, "caught up ") {
			t.Errorf("with the catch-up: built %d + %d of 6000 crossings; the second builder said %q", b1.EventsBuilt, b2.EventsBuilt, *secondErr)
		}
		if got := b1.Fragments.Received + b2.Fragments.Received; got != 6000*16 {
			t.Errorf("fragments received %d + %d, want every one of 96000 once (first %+v %+v, second %+v %+v)",
				b1.Fragments.Received, b2.Fragments.Received, b1.Fragments, b1.Transport, b2.Fragments, b2.Transport)
		}
	}
}

// The NATS server restarting in the middle of a run: every service
// reconnects (transport.Connect) and the run ends on its own. The builder's
// accounting closes over what reached it, and every event it built is
// decided or counted lost by the selection. Batches published while the
// server was down may be lost; those crossings are missing, never counted
// twice.
func TestNATSServerRestart(t *testing.T) {
	if testing.Short() {
		t.Skip("runs for about 3 s")
	}
	dir := t.TempDir()
	srv := newTestServer(t)
	port := srv.srv.Addr().(*net.TCPAddr).Port
	build, sel := filepath.Join(dir, "build.json"), filepath.Join(dir, "select.json")
	var wg sync.WaitGroup
	run := func(args ...string) {
		wg.Add(1)
		go func() {
			defer wg.Done()
			if code, _, stderr := runCLI(t, time.Minute, args...); code != 0 {
				t.Errorf("%s: exit %d: %s", args[0], code, stderr)
			}
		}()
	}
	run("select", "--nats", srv.url, "--summary-json", sel)
	run("build", "--nats", srv.url, "--summary-json", build)
	srv.awaitSubscriptions(2, "builder and selection")
	run("readout", "--nats", srv.url, "--crossings", "6000", "--seed", "5", "--rate", "3000")

	time.Sleep(time.Second) // a third of the way through the run
	srv.srv.Shutdown()
	srv.srv.WaitForShutdown()
	again, err := transport.Embedded("127.0.0.1", port)
	if err != nil {
		t.Fatalf("restart on port %d: %v", port, err)
	}
	t.Cleanup(func() { again.Shutdown(); again.WaitForShutdown() })
	wg.Wait()
	if t.Failed() {
		return
	}
	b, s := readSummary(t, build), readSummary(t, sel)
	if !b.Fragments.Closed() || b.EventsBuilt == 0 || b.EventsBuilt > 6000 {
		t.Fatalf("builder: %d events, fragments %+v", b.EventsBuilt, b.Fragments)
	}
	// Built events published during the outage may not reach the
	// selection either: it counts them lost instead of waiting for ever.
	if s.EventsDecided+s.Transport.EventsLost != b.EventsBuilt {
		t.Fatalf("selection decided %d and lost %d of the %d events built", s.EventsDecided, s.Transport.EventsLost, b.EventsBuilt)
	}
	t.Logf("after the restart: %d of 6000 crossings built (%d incomplete), %d fragments received; %d events decided, %d lost",
		b.EventsBuilt, b.EventsIncomplete, b.Fragments.Received, s.EventsDecided, s.Transport.EventsLost)
}
