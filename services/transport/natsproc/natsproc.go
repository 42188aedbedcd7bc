// Package natsproc runs the nats-server program as a process of its own,
// for tests that check the services against a server that is not built
// into them (a user's installed server, over TCP, of another version than
// the module the embedded default links in).
//
// The program is found as $BUNCHSIEVE_NATS_SERVER or nats-server on PATH
// (Debian package nats-server). Without it Start skips the test, and fails
// it when BUNCHSIEVE_REQUIRE_TOOLS=1, so that CI cannot pass by skipping.
package natsproc

import (
	"encoding/json"
	"errors"
	"fmt"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/bunchsieve/bunchsieve/internal/syncbuf"
	"github.com/bunchsieve/bunchsieve/internal/toolcheck"
)

// Server is one nats-server process with JetStream on a store of its own,
// listening on free loopback ports. Start registers its stop with
// t.Cleanup. Its methods are safe for concurrent use.
type Server struct {
	// URL is the client URL, nats://127.0.0.1:PORT.
	URL string
	// Monitor is the monitoring endpoint, http://127.0.0.1:PORT.
	Monitor string
	// Version is what the program printed for --version.
	Version string

	cmd  *exec.Cmd
	log  *syncbuf.Buffer
	done chan struct{}
}

// Binary returns the nats-server program to run, or "" if there is none.
func Binary() string {
	if b := os.Getenv("BUNCHSIEVE_NATS_SERVER"); b != "" {
		return b
	}
	if p, err := exec.LookPath("nats-server"); err == nil {
		return p
	}
	return ""
}

// Start runs a nats-server for t with JetStream enabled, or skips t when
// the program is not installed. It fails t if the server does not report
// its ports within 10 s.
func Start(t testing.TB) *Server {
	t.Helper()
	bin := Binary()
	if bin == "" {
		msg := "natsproc: no nats-server on PATH (install Debian's nats-server package, or set BUNCHSIEVE_NATS_SERVER)"
		toolcheck.Missing(t, msg)
	}
	version, err := exec.Command(bin, "--version").CombinedOutput()
	if err != nil {
		t.Fatalf("natsproc: %s --version: %v: %s", bin, err, version)
	}
	dir := storeDir(t)
	// Port -1 lets the server pick free ports; it writes them into the
	// ports file, so no port is guessed and raced for.
	cmd := exec.Command(bin, "-a", "127.0.0.1", "-p", "-1", "-m", "-1",
		"-js", "-sd", filepath.Join(dir, "jetstream"), "--ports_file_dir", dir)
	toolcheck.DieWithParent(cmd)
	s := &Server{Version: strings.TrimSpace(string(version)), cmd: cmd, log: &syncbuf.Buffer{Limit: 1 << 20}, done: make(chan struct{})}
	cmd.Stdout, cmd.Stderr = s.log, s.log
	if err := cmd.Start(); err != nil {
		t.Fatalf("natsproc: start %s: %v", bin, err)
	}
	go func() { _ = cmd.Wait(); close(s.done) }()
	t.Cleanup(s.stop)

	// The server names its ports file after its own program name and pid,
	// which a wrapper script in BUNCHSIEVE_NATS_SERVER would not share:
	// the folder is this server's alone, so any ports file in it will do.
	portsGlob := filepath.Join(dir, "*.ports")
	deadline := time.Now().Add(10 * time.Second)
	for {
		var ports struct {
			Nats       []string `json:"nats"`
			Monitoring []string `json:"monitoring"`
		}
		found, _ := filepath.Glob(portsGlob)
		var data []byte
		err := os.ErrNotExist
		if len(found) == 1 {
			data, err = os.ReadFile(found[0])
		}
		if err == nil && json.Unmarshal(data, &ports) == nil && len(ports.Nats) > 0 && len(ports.Monitoring) > 0 {
			s.URL, s.Monitor = ports.Nats[0], ports.Monitoring[0]
			break
		}
		select {
		case <-s.done:
			t.Fatalf("natsproc: %s exited at start: %s", bin, s.log.String())
		default:
		}
		if time.Now().After(deadline) {
			t.Fatalf("natsproc: %s wrote no ports file in %s within 10 s: %s", bin, dir, s.log.String())
		}
		time.Sleep(10 * time.Millisecond)
	}
	// The ports are written before JetStream is up; /healthz answers 200
	// once the server, JetStream included, is ready for clients.
	for {
		resp, err := monitorClient.Get(s.Monitor + "/healthz")
		if err == nil {
			resp.Body.Close()
			if resp.StatusCode == http.StatusOK {
				return s
			}
		}
		if time.Now().After(deadline) {
			t.Fatalf("natsproc: %s not healthy within 10 s (%v): %s", bin, err, s.log.String())
		}
		time.Sleep(10 * time.Millisecond)
	}
}

// monitorClient bounds each request to the monitoring port, so that a
// port that takes the connection and never answers cannot hold Start past
// its deadline.
var monitorClient = &http.Client{Timeout: 2 * time.Second}

// storePrefix begins the name of every server's folder (ports file and
// JetStream store), followed by the test process's pid.
const storePrefix = "bunchsieve-natsproc-"

// storeDir makes a folder for one server, removed when t ends. A test
// process stopped by -timeout runs no cleanup, so Start also removes the
// folders of test processes that are no longer running.
func storeDir(t testing.TB) string {
	t.Helper()
	old, _ := filepath.Glob(filepath.Join(os.TempDir(), storePrefix+"*"))
	for _, d := range old {
		pid, _, ok := strings.Cut(strings.TrimPrefix(filepath.Base(d), storePrefix), "-")
		if n, err := strconv.Atoi(pid); ok && err == nil && !running(n) {
			_ = os.RemoveAll(d)
		}
	}
	dir, err := os.MkdirTemp("", fmt.Sprintf("%s%d-", storePrefix, os.Getpid()))
	if err != nil {
		t.Fatalf("natsproc: %v", err)
	}
	t.Cleanup(func() { _ = os.RemoveAll(dir) })
	return dir
}

// running reports whether a process of that pid exists.
func running(pid int) bool {
	p, err := os.FindProcess(pid)
	if err != nil {
		return false
	}
	return !errors.Is(p.Signal(syscall.Signal(0)), os.ErrProcessDone)
}

// Subscriptions returns the number of subscriptions the server holds, from
// its /varz monitoring page.
func (s *Server) Subscriptions() (uint32, error) {
	resp, err := monitorClient.Get(s.Monitor + "/varz")
	if err != nil {
		return 0, fmt.Errorf("natsproc: %w", err)
	}
	defer resp.Body.Close()
	var v struct {
		Subscriptions uint32 `json:"subscriptions"`
	}
	if err := json.NewDecoder(resp.Body).Decode(&v); err != nil {
		return 0, fmt.Errorf("natsproc: /varz: %w", err)
	}
	return v.Subscriptions, nil
}

// Log returns what the server printed so far.
func (s *Server) Log() string { return s.log.String() }

// stop ends the server: an interrupt, which lets it shut down cleanly,
// then a kill if it is still there after 5 s.
func (s *Server) stop() {
	_ = s.cmd.Process.Signal(os.Interrupt)
	select {
	case <-s.done:
	case <-time.After(5 * time.Second):
		_ = s.cmd.Process.Kill()
		<-s.done
	}
}
