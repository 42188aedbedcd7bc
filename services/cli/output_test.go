package cli

import (
	"bytes"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

// Between runs the server reports no prescale set when the next run takes
// the menu's active one; ctl status says so instead of leaving a blank.
func TestStatusPrescaleSetLabel(t *testing.T) {
	for _, c := range []struct {
		st   *pb.RunStatus
		want string
	}{
		{&pb.RunStatus{Phase: pb.RunPhase_RUN_PHASE_READY, MenuName: "m", MenuHash: "0123456789abcdef"}, "prescale set (menu default)\n"},
		{&pb.RunStatus{Phase: pb.RunPhase_RUN_PHASE_FLOWING, MenuName: "m", MenuHash: "0123456789abcdef", PrescaleSet: "quiet"}, "prescale set quiet\n"},
		{&pb.RunStatus{Phase: pb.RunPhase_RUN_PHASE_IDLE}, "prescale set -\n"},
	} {
		var b bytes.Buffer
		printStatus(&b, c.st)
		if first, _, _ := strings.Cut(b.String(), "\n"); !strings.HasSuffix(first+"\n", c.want) {
			t.Errorf("phase %v: status line %q, want it to end in %q", c.st.Phase, first, c.want)
		}
	}
}

// The readout names each kind of injected fault with its count, and the
// builder's summary shows what the builder counted and no seed or menu,
// which it does not have.
func TestReadoutFaultsAndBuildSummary(t *testing.T) {
	srv := newTestServer(t)
	url := srv.url
	type result struct {
		code           int
		stdout, stderr string
	}
	built := make(chan result, 1)
	go func() {
		code, stdout, stderr := runCLI(t, time.Minute, "build", "--nats", url)
		built <- result{code, stdout, stderr}
	}()
	srv.awaitSubscriptions(1, "builder")
	code, stdout, stderr := runCLI(t, time.Minute, "readout", "--nats", url, "--crossings", "640", "--rate", "0", "--fault", "drop=0.1")
	if code != 0 {
		t.Fatalf("readout: exit %d: %s", code, stderr)
	}
	m := regexp.MustCompile(`(?m)^readout: faults injected in fragments: (\d+) dropped, 0 duplicated, 0 corrupted, 0 delayed, 0 reordered, 0 stalled$`).FindStringSubmatch(stdout)
	if m == nil {
		t.Fatalf("readout output lacks the injected faults line:\n%s", stdout)
	}
	// 640 crossings x 16 sources at 10%: about 1,024 dropped.
	if n, _ := strconv.Atoi(m[1]); n < 800 || n > 1250 {
		t.Errorf("%d fragments dropped, want about 1024", n)
	}
	var b result
	select {
	case b = <-built:
	case <-time.After(time.Minute):
		t.Fatal("builder did not end with the run")
	}
	if b.code != 0 {
		t.Fatalf("build: exit %d: %s", b.code, b.stderr)
	}
	for _, want := range []string{"run 1  16 sources", "built 640 (", "fragments received ", "latency: build p50 "} {
		if !strings.Contains(b.stdout, want) {
			t.Errorf("build summary lacks %q:\n%s", want, b.stdout)
		}
	}
	for _, unwanted := range []string{"seed", "menu", "prescale", "decided", "end to end", "accepted"} {
		if strings.Contains(b.stdout, unwanted) {
			t.Errorf("build summary shows %q, which the builder does not have:\n%s", unwanted, b.stdout)
		}
	}
}

// A report with only the overlap plot says "1 plot".
func TestReplayPlotCount(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "out")
	code, stdout, stderr := runCLI(t, time.Minute, "replay", "--generate", "20", "--generator", "simple", "--out", dir)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	if !strings.Contains(stdout, " and 1 plot (PNG and SVG) to ") {
		t.Errorf("stdout lacks the singular plot count:\n%s", stdout)
	}
	if got := plots(3); got != "3 plots" {
		t.Errorf("plots(3) = %q", got)
	}
}
