package cli

import (
	"fmt"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/bunchsieve/bunchsieve/services/recording"
)

// The durable recording from end to end, as a user drives it: open the
// stream on a JetStream-enabled server, run the readout against it, save
// the run into a file, replay the file through the menu. The rates come
// out exactly as for the same crossings written by record (same seed),
// which never went through NATS; removing the stream leaves nothing to
// save.
func TestCaptureCommands(t *testing.T) {
	t.Run("embedded", func(t *testing.T) { captureCommands(t, jetStreamServer(t)) })
	// The installed server program may be of an older version than the
	// embedded one: the stream and consumer settings must suit it too.
	t.Run("nats-server program", func(t *testing.T) { captureCommands(t, newProgramServer(t).url) })
}

func captureCommands(t *testing.T, url string) {
	dir := t.TempDir()

	code, out, errs := runCLI(t, time.Minute, "capture", "open", "--nats", url, "--max-mib", "64")
	if code != 0 || !strings.Contains(out, "stream bunchsieve_fragments created, storing bunchsieve.frag.>") {
		t.Fatalf("capture open: exit %d\n%s%s", code, out, errs)
	}
	if code, out, errs = runCLI(t, time.Minute, "readout", "--nats", url, "--crossings", "800", "--seed", "11", "--rate", "0"); code != 0 {
		t.Fatalf("readout: exit %d\n%s%s", code, out, errs)
	}
	kept := filepath.Join(dir, "kept.bss")
	code, out, errs = runCLI(t, time.Minute, "capture", "save", "--nats", url, "--out", kept, "--idle", "2s", "--seed", "11")
	if code != 0 || !strings.Contains(out, "800 crossings") || !strings.Contains(out, "16 of 16 source/share pairs ended; complete") {
		t.Fatalf("capture save: exit %d\n%s%s", code, out, errs)
	}
	r, err := recording.Open(kept)
	if err != nil {
		t.Fatal(err)
	}
	if h := r.Header(); h.Seed != 11 || h.Run != 1 {
		t.Errorf("header: seed %d, run %d; want the readout's 11 and 1", h.Seed, h.Run)
	}
	r.Close()
	if _, err := os.Stat(kept + ".partial"); !os.IsNotExist(err) {
		t.Errorf("the partial file is left behind: %v", err)
	}
	direct := filepath.Join(dir, "direct.bss")
	if code, out, errs = runCLI(t, time.Minute, "record", "--crossings", "800", "--seed", "11", "--out", direct); code != 0 {
		t.Fatalf("record: exit %d\n%s%s", code, out, errs)
	}
	var rates [2][]byte
	for i, stream := range []string{kept, direct} {
		rd := filepath.Join(dir, "report"+string(rune('a'+i)))
		if code, out, errs = runCLI(t, 2*time.Minute, "replay", "--stream", stream, "--out", rd, "--no-progress"); code != 0 {
			t.Fatalf("replay %s: exit %d\n%s%s", stream, code, out, errs)
		}
		var err error
		if rates[i], err = os.ReadFile(filepath.Join(rd, "rates.csv")); err != nil {
			t.Fatal(err)
		}
	}
	if string(rates[0]) != string(rates[1]) {
		t.Errorf("rates of the saved run differ from those of the recorded one:\n%s\n---\n%s", rates[0], rates[1])
	}

	if code, out, errs = runCLI(t, time.Minute, "capture", "remove", "--nats", url); code != 0 || !strings.Contains(out, "removed") {
		t.Fatalf("capture remove: exit %d\n%s%s", code, out, errs)
	}
	code, _, errs = runCLI(t, time.Minute, "capture", "save", "--nats", url, "--out", filepath.Join(dir, "none.bss"))
	if code != 1 || !strings.Contains(errs, "no stream bunchsieve_fragments") {
		t.Errorf("save after remove: exit %d, %s", code, errs)
	}
}

// jetStreamServer starts an embedded server with JetStream for one test
// and returns its URL.
func jetStreamServer(t *testing.T) string {
	t.Helper()
	return newJetStreamTestServer(t).url
}

// A run whose readout never ended is saved with what was stored, and the
// command says what is missing and exits 1.
func TestCaptureSaveIncomplete(t *testing.T) {
	url := jetStreamServer(t)
	if code, out, errs := runCLI(t, time.Minute, "capture", "open", "--nats", url, "--max-mib", "64", "--subject-prefix", "part"); code != 0 {
		t.Fatalf("capture open: exit %d\n%s%s", code, out, errs)
	}
	// The readout sends to two builder shares; saving as if there were
	// three leaves share 2 of every source without an end.
	if code, out, errs := runCLI(t, time.Minute, "readout", "--nats", url, "--crossings", "200", "--builders", "2", "--subject-prefix", "part", "--sources", "4"); code != 0 {
		t.Fatalf("readout: exit %d\n%s%s", code, out, errs)
	}
	out := filepath.Join(t.TempDir(), "part.bss")
	code, stdout, errs := runCLI(t, time.Minute, "capture", "save", "--nats", url, "--out", out, "--idle", "300ms",
		"--builders", "3", "--subject-prefix", "part", "--sources", "4")
	if code != 1 || !strings.Contains(stdout, "8 of 12 source/share pairs ended; INCOMPLETE") ||
		!strings.Contains(errs, "4 of 12 source/share pairs sent no end-of-run batch (source 1 share 2, ") {
		t.Errorf("save with a share too many: exit %d\n%s%s", code, stdout, errs)
	}
	if info, err := os.Stat(out); err != nil || info.Size() == 0 {
		t.Errorf("the incomplete run was not written: %v", err)
	}
}

// up --capture stores the run in the embedded server's JetStream and
// saves it at the end: every crossing the chain ran is in the file, and
// the file replays.
func TestUpCapture(t *testing.T) {
	dir := t.TempDir()
	kept := filepath.Join(dir, "up.bss")
	code, out, errs := runCLI(t, time.Minute, "up", "--crossings", "700", "--quiet", "--metrics-addr", "", "--capture", kept)
	if code != 0 || !strings.Contains(out, "capture: run 1 from stream bunchsieve_fragments: 700 crossings") || !strings.Contains(out, "; complete") {
		t.Fatalf("up --capture: exit %d\n%s%s", code, out, errs)
	}
	r, err := recording.Open(kept)
	if err != nil {
		t.Fatal(err)
	}
	h := r.Header()
	r.Close()
	if h.Run != 1 || len(h.SourceIds) != 16 || h.Partitions != 1 || !strings.Contains(h.Producer, "capture save") {
		t.Errorf("header: run %d, %d sources, %d shares, producer %q", h.Run, len(h.SourceIds), h.Partitions, h.Producer)
	}
	rd := filepath.Join(dir, "report")
	if code, out, errs = runCLI(t, 2*time.Minute, "replay", "--stream", kept, "--out", rd, "--no-progress"); code != 0 || !strings.Contains(out, "replayed 700 events") {
		t.Fatalf("replay: exit %d\n%s%s", code, out, errs)
	}
}

// serve --jetstream-dir lets capture record the served runs: two runs
// started with ctl go into one stream, and each is saved on its own.
func TestServeCapture(t *testing.T) {
	dir := t.TempDir()
	tokenFile := filepath.Join(dir, "token")
	addr, out := startServe(t, "--control", "127.0.0.1:0", "--metrics-addr", "", "--token-file", tokenFile,
		"--jetstream-dir", filepath.Join(dir, "js"), "--crossings", "500", "--rate", "0")
	m := regexp.MustCompile(`NATS (nats://\S+);`).FindStringSubmatch(out.String())
	if m == nil {
		t.Fatalf("no NATS URL in %q", out.String())
	}
	url := m[1]
	if code, stdout, stderr := runCLI(t, time.Minute, "capture", "open", "--nats", url); code != 0 {
		t.Fatalf("capture open: exit %d\n%s%s", code, stdout, stderr)
	}
	ctl := func(args ...string) (int, string, string) {
		return runCLI(t, 15*time.Second, append([]string{"ctl", "--addr", addr, "--token-file", tokenFile, "--timeout", "5s"}, args...)...)
	}
	for run := 1; run <= 2; run++ {
		if code, stdout, stderr := ctl("start"); code != 0 {
			t.Fatalf("start: exit %d, %q %q", code, stdout, stderr)
		}
		ended := fmt.Sprintf("run %d ended", run)
		for deadline := time.Now().Add(30 * time.Second); ; {
			_, stdout, _ := ctl("status")
			if strings.Contains(stdout, ended) && strings.Contains(stdout, "phase ready") {
				break
			}
			if time.Now().After(deadline) {
				t.Fatalf("run %d did not end: %q", run, stdout)
			}
			time.Sleep(50 * time.Millisecond)
		}
	}
	for run := 1; run <= 2; run++ {
		path := filepath.Join(dir, fmt.Sprintf("run%d.bss", run))
		code, stdout, stderr := runCLI(t, time.Minute, "capture", "save", "--nats", url, "--run", strconv.Itoa(run), "--out", path, "--idle", "2s")
		want := fmt.Sprintf("capture: run %d from stream bunchsieve_fragments: 500 crossings", run)
		if code != 0 || !strings.Contains(stdout, want) || !strings.Contains(stdout, "; complete") || !strings.Contains(stdout, "of run "+strconv.Itoa(3-run)+" skipped") {
			t.Errorf("save run %d: exit %d\n%s%s", run, code, stdout, stderr)
		}
	}
}

// An interrupted save leaves the file it would replace as it was, and
// what it read in FILE.partial; a path that cannot be written is refused
// before anything is read or run.
func TestCaptureSaveInterrupted(t *testing.T) {
	url := jetStreamServer(t)
	dir := t.TempDir()
	if code, out, errs := runCLI(t, time.Minute, "capture", "open", "--nats", url); code != 0 || !strings.Contains(out, "limit 256 MiB") {
		t.Fatalf("capture open without --max-mib on a 256 MiB store: exit %d\n%s%s", code, out, errs)
	}
	good := filepath.Join(dir, "good.bss")
	if err := os.WriteFile(good, []byte("an earlier recording"), 0o644); err != nil {
		t.Fatal(err)
	}
	// Saved as if the readout had sent to two builder shares, the run
	// never ends: the save waits until the command is interrupted.
	if code, out, errs := runCLI(t, time.Minute, "readout", "--nats", url, "--crossings", "300"); code != 0 {
		t.Fatalf("readout: exit %d\n%s%s", code, out, errs)
	}
	code, stdout, errs := runCLI(t, time.Second, "capture", "save", "--nats", url, "--out", good, "--builders", "2", "--idle", "1m")
	if code != 1 || !strings.Contains(errs, "interrupted: the ") || !strings.Contains(errs, "good.bss is unchanged") ||
		!strings.Contains(stdout, "to "+good+".partial;") {
		t.Errorf("interrupted save: exit %d\n%s%s", code, stdout, errs)
	}
	if data, err := os.ReadFile(good); err != nil || string(data) != "an earlier recording" {
		t.Errorf("the earlier file was changed: %q, %v", data, err)
	}
	if _, err := recording.Open(good + ".partial"); err != nil {
		t.Errorf("the partial file does not read as a stream: %v", err)
	}

	bad := filepath.Join(dir, "no-such-dir", "x.bss")
	for _, args := range [][]string{
		{"capture", "save", "--nats", url, "--out", bad},
		{"up", "--crossings", "1000000000", "--quiet", "--metrics-addr", "", "--capture", bad},
	} {
		code, out, errs := runCLI(t, time.Minute, args...)
		if code != 1 || !strings.Contains(errs, "no such file or directory") || strings.Contains(out, "crossings") {
			t.Errorf("%s with an unwritable file: exit %d\n%s%s", args[0], code, out, errs)
		}
	}
}
