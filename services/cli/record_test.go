package cli

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// record's help lists the flags record acts on, and only those: the
// offered rate, the metrics address, the subject prefix and the summary
// file of the commands that run the chain do nothing in a recording, so
// they are not offered, and giving one is an unknown flag.
func TestRecordHelpMatchesItsFlags(t *testing.T) {
	code, stdout, stderr := runCLI(t, 10*time.Second, "record", "--help")
	if code != 0 || stderr != "" {
		t.Fatalf("record --help: exit %d, stderr %q", code, stderr)
	}
	for _, want := range []string{"usage: bunchsieve record --crossings N --out FILE", "-crossings N", "-duration", "-seed", "-sources", "-config FILE", "-out FILE", "-builders", "-fault"} {
		if !strings.Contains(stdout, want) {
			t.Errorf("record --help lacks %q:\n%s", want, stdout)
		}
	}
	out := filepath.Join(t.TempDir(), "r.bss")
	for _, name := range []string{"rate", "metrics-addr", "subject-prefix", "summary-json"} {
		if strings.Contains(stdout, "-"+name+" ") || strings.Contains(stdout, "-"+name+"\n") {
			t.Errorf("record --help offers --%s, which record does not use:\n%s", name, stdout)
		}
		code, _, stderr := runCLI(t, 10*time.Second, "record", "--crossings", "10", "--out", out, "--"+name, "0")
		if code != 2 || !strings.Contains(stderr, "flag provided but not defined: -"+name) {
			t.Errorf("record --%s 0: exit %d, stderr %q; want exit 2, an unknown flag", name, code, stderr)
		}
	}
	if _, err := os.Stat(out); !os.IsNotExist(err) {
		t.Errorf("a refused command wrote %s: %v", out, err)
	}
	// The flags taken over from the run flags still act.
	code, stdout, stderr = runCLI(t, time.Minute, "record", "--crossings", "64", "--seed", "5", "--sources", "4", "--out", out)
	if code != 0 || !strings.Contains(stdout, "record: 64 crossings") {
		t.Fatalf("record: exit %d, %s %s", code, stdout, stderr)
	}
}
