package cli

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/bunchsieve/bunchsieve/services/usage"
)

// replay runs end to end on a small generated sample and writes every
// output; a second run with the same seed writes the same report.json and
// rates.csv.
func TestReplayEndToEnd(t *testing.T) {
	var outputs [2][2][]byte
	tighter := writeMenu(t)
	for i := range 2 {
		dir := filepath.Join(t.TempDir(), "out")
		code, stdout, stderr := runCLI(t, time.Minute, "replay", "--generate", "400", "--seed", "3", "--mu", "10",
			"--out", dir, "--scan", "met-120:met=40:160:40", "--efficiency", "one-jet-180:truth-jet-pt=0:400:40",
			"--compare", tighter, "--scale-lumi", "1e34:2e34")
		if code != 0 {
			t.Fatalf("exit %d: %s", code, stderr)
		}
		if stderr != "" {
			t.Errorf("stderr not a terminal, yet: %q", stderr)
		}
		for _, want := range []string{"menu lantern-starter", "400 crossings", "not measurements", "met-120", "total", "scan of met-120", "compared with menu tighter", "replayed 400 events in ", ", generating, building"} {
			if !strings.Contains(stdout, want) {
				t.Errorf("stdout lacks %q:\n%s", want, stdout)
			}
		}
		for _, name := range []string{"report.json", "rates.csv", "report.root", "overlap.png", "overlap.svg", "scan_0_met_120.png", "turnon_0_one_jet_180_truth_jet_pt.svg"} {
			if info, err := os.Stat(filepath.Join(dir, name)); err != nil || info.Size() == 0 {
				t.Errorf("%s: %v", name, err)
			}
		}
		for k, name := range []string{"report.json", "rates.csv"} {
			data, err := os.ReadFile(filepath.Join(dir, name))
			if err != nil {
				t.Fatal(err)
			}
			outputs[i][k] = data
		}
		var rep struct {
			Schema        string `json:"schema"`
			SchemaVersion int    `json:"schema_version"`
			Processing    struct {
				Crossings uint64 `json:"crossings"`
			} `json:"processing"`
		}
		if err := json.Unmarshal(outputs[i][0], &rep); err != nil || rep.Schema != "bunchsieve-report" || rep.SchemaVersion != 1 || rep.Processing.Crossings != 400 {
			t.Fatalf("report.json %+v: %v", rep, err)
		}
	}
	if string(outputs[0][0]) != string(outputs[1][0]) || string(outputs[0][1]) != string(outputs[1][1]) {
		t.Error("two runs with the same seed wrote different report.json or rates.csv")
	}
}

func writeMenu(t *testing.T) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), "tighter.yaml")
	menu := "menu: tighter\nversion: 1\nfeatures:\n  jets: {finder: window, seed: 5 GeV, min_et: 20 GeV}\nrules:\n  met-120: {when: \"met > 150 GeV\"}\n  jets-high: {when: \"ht > 600 GeV\"}\n"
	if err := os.WriteFile(path, []byte(menu), 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

// Bad flags give one line on standard error and exit status 2.
func TestReplayBadFlags(t *testing.T) {
	out := t.TempDir()
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"--generate", "10"}, "--out DIR is required"},
		{[]string{"--out", out}, "give --stream FILE or --generate N"},
		{[]string{"--out", out, "--generate", "10", "--stream", "x.bss"}, "not both"},
		{[]string{"--out", out, "--stream", "x.bss", "--seed", "4"}, "--seed applies to --generate only"},
		{[]string{"--out", out, "--generate", "0"}, "--generate 0"},
		{[]string{"--out", out, "--generate", "10", "--generator", "toy"}, "--generator \"toy\""},
		{[]string{"--out", out, "--generate", "10", "--scan", "met-120:met"}, "--scan: scan \"met-120:met\""},
		{[]string{"--out", out, "--generate", "10", "--efficiency", "met-120"}, "--efficiency: efficiency \"met-120\""},
		{[]string{"--out", out, "--generate", "10", "--scale-lumi", "5"}, "--scale-lumi"},
		{[]string{"--out", out, "--generate", "10", "--cl", "1.5"}, "--cl 1.5"},
		{[]string{"--out", out, "--generate", "10", "--prescale-set", "loud"}, "unknown prescale set \"loud\""},
		{[]string{"--out", out, "--generate", "10", "--generator", "simple", "--force", "z-ee"}, "--force needs --generator physics"},
		{[]string{"--out", out, "--generate", "10", "--bogus"}, "flag provided but not defined: -bogus"},
	} {
		code, _, stderr := runCLI(t, 30*time.Second, append([]string{"replay"}, c.args...)...)
		lines := strings.Split(strings.TrimRight(stderr, "\n"), "\n")
		if code != 2 || len(lines) != 1 || !strings.HasPrefix(stderr, "bunchsieve replay: ") || !strings.Contains(stderr, c.want) {
			t.Errorf("replay %s: exit %d, stderr %q; want exit 2 and one line with %q", strings.Join(c.args, " "), code, stderr, c.want)
		}
	}
	// A scan of a rule the menu does not have fails at the start, in one
	// line and with the status of a usage error, after the flags are read.
	code, _, stderr := runCLI(t, 30*time.Second, "replay", "--out", out, "--generate", "10", "--scan", "nope:t1=1:2:1")
	if code != 2 || strings.Count(strings.TrimRight(stderr, "\n"), "\n") != 0 || !strings.Contains(stderr, "unknown rule \"nope\"") {
		t.Errorf("unknown rule: exit %d, %q", code, stderr)
	}
}

// TestReplayCPUProfile: --cpuprofile writes a profile in pprof's format
// (gzip-compressed, RFC 1952: it starts 0x1f 0x8b), --trace an execution
// trace, and an unwritable path is a one-line error before anything runs
// or is written.
func TestReplayCPUProfile(t *testing.T) {
	dir := t.TempDir()
	prof := filepath.Join(dir, "replay.prof")
	code, _, stderr := runCLI(t, time.Minute, "replay", "--generate", "200", "--mu", "10", "--out", filepath.Join(dir, "out"), "--cpuprofile", prof)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	data, err := os.ReadFile(prof)
	if err != nil || len(data) < 2 || data[0] != 0x1f || data[1] != 0x8b {
		t.Fatalf("profile %d bytes, %v: not gzip", len(data), err)
	}
	// --trace writes Go's execution trace format, which starts with
	// "go 1." and the format version (runtime/trace).
	trace := filepath.Join(dir, "replay.trace")
	code, _, stderr = runCLI(t, time.Minute, "replay", "--generate", "200", "--mu", "10", "--out", filepath.Join(dir, "out3"), "--trace", trace)
	if data, err := os.ReadFile(trace); code != 0 || err != nil || !strings.HasPrefix(string(data), "go 1.") {
		t.Fatalf("--trace: exit %d, %s, %v", code, stderr, err)
	}
	code, _, stderr = runCLI(t, time.Minute, "replay", "--generate", "10", "--out", filepath.Join(dir, "out2"), "--cpuprofile", filepath.Join(dir, "missing", "p.prof"))
	if code == 0 || strings.Count(stderr, "\n") != 1 || !strings.Contains(stderr, "cpu profile") {
		t.Errorf("unwritable profile: exit %d, stderr %q", code, stderr)
	}
	if _, err := os.Stat(filepath.Join(dir, "out2")); !os.IsNotExist(err) {
		t.Errorf("the output directory was made before the profile failed: %v", err)
	}
}

// The throughput line: events over wall time, processor time per event.
func TestThroughputLine(t *testing.T) {
	got := throughputLine(40000, 2*time.Second, usage.CPU{User: 900 * time.Millisecond, System: 100 * time.Millisecond}, false)
	want := "replayed 40000 events in 2.00 s, reading, building, selecting and writing the report: 20000 events/s"
	if usage.Available {
		want += ", 25.0 µs of processor time per event"
	}
	if got != want {
		t.Errorf("got  %q\nwant %q", got, want)
	}
	if got := throughputLine(0, time.Second, usage.CPU{}, true); got != "replayed 0 events in 1.00 s, generating, building, selecting and writing the report" {
		t.Errorf("no events: %q", got)
	}
}

// --prescale-set and --compare-prescale-set are what the report names: in
// the table and in report.json, for the menu and the menu compared.
func TestReplayNamesThePrescaleSetUsed(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "out")
	code, stdout, stderr := runCLI(t, time.Minute, "replay", "--generate", "100", "--seed", "3", "--mu", "10", "--no-progress",
		"--out", dir, "--prescale-set", "quiet", "--compare", writeMenuWithSets(t), "--compare-prescale-set", "strict")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	for _, want := range []string{"), prescale set quiet\n", "compared with menu two-sets (hash ", "), prescale set strict;"} {
		if !strings.Contains(stdout, want) {
			t.Errorf("stdout lacks %q:\n%s", want, stdout)
		}
	}
	data, err := os.ReadFile(filepath.Join(dir, "report.json"))
	if err != nil {
		t.Fatal(err)
	}
	var rep struct {
		Menu struct {
			PrescaleSet string `json:"prescale_set"`
		} `json:"menu"`
		Comparison struct {
			Menu struct {
				PrescaleSet string `json:"prescale_set"`
			} `json:"menu"`
		} `json:"comparison"`
	}
	if err := json.Unmarshal(data, &rep); err != nil {
		t.Fatal(err)
	}
	if rep.Menu.PrescaleSet != "quiet" || rep.Comparison.Menu.PrescaleSet != "strict" {
		t.Errorf("report.json names prescale sets %q and %q, want quiet and strict", rep.Menu.PrescaleSet, rep.Comparison.Menu.PrescaleSet)
	}
}

// writeMenuWithSets writes a menu with two prescale sets, the first one
// active.
func writeMenuWithSets(t *testing.T) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), "two-sets.yaml")
	menu := "menu: two-sets\nversion: 1\nrules:\n  met-120: {when: \"met > 120 GeV\"}\n  sumet-500: {when: \"sumet > 500 GeV\"}\n" +
		"prescale_sets:\n  usual: {sumet-500: 2}\n  strict: {sumet-500: 20}\nactive_set: usual\n"
	if err := os.WriteFile(path, []byte(menu), 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}
