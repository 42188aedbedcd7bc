package cli

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/bunchsieve/bunchsieve/loadtest"
)

// `bunchsieve loadtest` runs a short sweep end to end and writes the JSON
// report and the plot it was asked for.
func TestLoadtestCommand(t *testing.T) {
	dir := t.TempDir()
	jsonPath, pngPath, tracePath, profPath := filepath.Join(dir, "lt.json"), filepath.Join(dir, "lt.png"), filepath.Join(dir, "lt.trace"), filepath.Join(dir, "lt.prof")
	code, stdout, stderr := runCLI(t, time.Minute, "loadtest", "--dataset", "1200", "--rates", "1k,2k", "--duration", "500ms",
		"--baseline-runs", "1", "--baseline-length", "100ms", "--json", jsonPath, "--png", pngPath, "--trace", tracePath, "--cpuprofile", profPath)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	if stderr != "" {
		t.Errorf("progress went to a stderr that is not a terminal: %q", stderr)
	}
	for _, want := range []string{"offered/s", "raw transport, 1 hop", "saturation"} {
		if !strings.Contains(stdout, want) {
			t.Errorf("table lacks %q:\n%s", want, stdout)
		}
	}
	// An execution trace starts with the runtime's header, "go 1.".
	if tr, err := os.ReadFile(tracePath); err != nil || !strings.HasPrefix(string(tr), "go 1.") {
		t.Errorf("--trace wrote %d bytes (%v), not an execution trace", len(tr), err)
	}
	// A CPU profile is gzip-compressed (RFC 1952: it starts 0x1f 0x8b).
	if p, err := os.ReadFile(profPath); err != nil || len(p) < 2 || p[0] != 0x1f || p[1] != 0x8b {
		t.Errorf("--cpuprofile wrote %d bytes (%v), not a profile", len(p), err)
	}
	rep := readLoadReport(t, jsonPath)
	if rep.Schema != loadtest.SchemaVersion || len(rep.Steps) != 2 || rep.Baseline == nil || !strings.HasPrefix(rep.Command, "bunchsieve loadtest --dataset 1200") {
		t.Fatalf("report: %+v", rep)
	}
	for _, st := range rep.Steps {
		if !st.Account.Lossless() {
			t.Fatalf("step at %v/s lost events: %+v", st.OfferedHz, st.Account)
		}
	}
	if fi, err := os.Stat(pngPath); err != nil || fi.Size() == 0 {
		t.Fatalf("plot: %v", err)
	}
}

// The harness against the installed nats-server program over TCP (--nats):
// the pipeline and both baselines run, and every step's accounting closes.
// With capture it also stores every batch in that server's JetStream.
func TestLoadtestOnNATSServerProgram(t *testing.T) {
	srv := newProgramServer(t)
	jsonPath := filepath.Join(t.TempDir(), "lt.json")
	code, _, stderr := runCLI(t, time.Minute, "loadtest", "--nats", srv.url, "--capture", "--dataset", "1200", "--rates", "1k,0",
		"--duration", "500ms", "--baseline-runs", "1", "--baseline-length", "100ms", "--json", jsonPath)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	rep := readLoadReport(t, jsonPath)
	if rep.Transport != "tcp "+srv.url || len(rep.Steps) != 2 || rep.Baseline == nil {
		t.Fatalf("report: transport %q, %d steps, baseline %v", rep.Transport, len(rep.Steps), rep.Baseline)
	}
	for _, st := range rep.Steps {
		a := st.Account
		if !a.Lossless() || a.Capture == nil || a.Capture.Stored != a.Capture.Published || a.Capture.Published == 0 {
			t.Errorf("step at %v/s: %+v, capture %+v", st.OfferedHz, a, a.Capture)
		}
	}
}

// An unwritable profile or trace path is a one-line error, and no report
// is written.
func TestLoadtestUnwritableCapture(t *testing.T) {
	dir := t.TempDir()
	for _, flag := range []string{"--cpuprofile", "--trace"} {
		jsonPath := filepath.Join(dir, "lt.json")
		code, _, stderr := runCLI(t, time.Minute, "loadtest", "--dataset", "1200", "--rate", "1k", "--duration", "200ms",
			"--baseline-runs", "0", "--json", jsonPath, flag, filepath.Join(dir, "missing", "x"))
		what := map[string]string{"--cpuprofile": "cpu profile", "--trace": "trace"}[flag]
		if code == 0 || strings.Count(stderr, "\n") != 1 || !strings.Contains(stderr, what) {
			t.Errorf("%s unwritable: exit %d, stderr %q", flag, code, stderr)
		}
		if _, err := os.Stat(jsonPath); !os.IsNotExist(err) {
			t.Errorf("%s unwritable: a report was written anyway (%v)", flag, err)
		}
	}
}

// Contradictory or malformed flags are usage errors (exit status 2).
func TestLoadtestUsage(t *testing.T) {
	for _, args := range [][]string{
		{"--rate", "10k", "--rates", "1k,2k"},
		{"--rates", "5k:1k:1k"},
		{"--rate", "fast"},
		{"--soak", "1m"},
		{"--soak", "1m", "--rate", "0"},
		{"--nats", "nats://127.0.0.1:4222", "--cluster"},
		{"--stream", "x.bss", "--seed", "3"},
		{"--generator", "magic"},
		{"--dataset", "0"},
	} {
		code, _, stderr := runCLI(t, 10*time.Second, append([]string{"loadtest"}, args...)...)
		if code != 2 || !strings.Contains(stderr, "bunchsieve loadtest:") {
			t.Errorf("%v: exit %d, stderr %q; want a usage error", args, code, stderr)
		}
	}
}

// Rates parse with k and M suffixes, as lists and as sweeps.
func TestParseRates(t *testing.T) {
	got, err := parseRates("20k:60k:20k")
	if err != nil || len(got) != 3 || got[0] != 20000 || got[2] != 60000 {
		t.Fatalf("sweep: %v %v", got, err)
	}
	got, err = parseRates("0, 1.5k,2M")
	if err != nil || len(got) != 3 || got[0] != 0 || got[1] != 1500 || got[2] != 2e6 {
		t.Fatalf("list: %v %v", got, err)
	}
}

// readLoadReport reads the JSON report loadtest --json wrote.
func readLoadReport(t *testing.T, path string) loadtest.Report {
	t.Helper()
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	var rep loadtest.Report
	if err := json.Unmarshal(data, &rep); err != nil {
		t.Fatal(err)
	}
	return rep
}
