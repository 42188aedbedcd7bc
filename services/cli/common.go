package cli

import (
	"flag"
	"fmt"
	"io"
	"math"
	"net"
	"os"
	"runtime/pprof"
	"runtime/trace"
	"strconv"
	"sync"
	"time"

	"github.com/bunchsieve/bunchsieve/services/runconfig"
)

// runFlags are the flags shared by commands that take a run configuration.
type runFlags struct {
	config    string
	seed      uint64
	sources   int
	rate      float64
	menu      string
	crossings uint64
	duration  time.Duration
	summary   string
	metrics   string
	prefix    string
}

func (r *runFlags) register(fs *flag.FlagSet, metricsDefault string, generator bool) {
	fs.StringVar(&r.config, "config", "", "run configuration `FILE` (default: the built-in examples/run.yaml)")
	fs.IntVar(&r.sources, "sources", 0, "number of calorimeter readout sources, 1..128 (default from the configuration: 16)")
	fs.StringVar(&r.metrics, "metrics-addr", metricsDefault, "`host:port` to serve /metrics on; empty for none")
	fs.StringVar(&r.prefix, "subject-prefix", "", "NATS subject prefix (default from the configuration: bunchsieve)")
	fs.StringVar(&r.summary, "summary-json", "", "write the final summary as JSON to `FILE`")
	if generator {
		fs.Uint64Var(&r.seed, "seed", 0, "generator seed (default from the configuration: 42)")
		fs.Float64Var(&r.rate, "rate", 0, "offered crossings per second; 0 = as fast as possible (default from the configuration: 5000)")
		fs.Uint64Var(&r.crossings, "crossings", 0, "stop after `N` crossings, then drain")
		fs.DurationVar(&r.duration, "duration", 0, "stop offering after this long, then drain (e.g. 10s)")
	}
}

// resolve loads the configuration and applies the flags given on the
// command line over it.
func (r *runFlags) resolve(set map[string]bool) (runconfig.Config, error) {
	var cfg runconfig.Config
	if r.config != "" {
		c, err := runconfig.Load(r.config)
		if err != nil {
			return cfg, err
		}
		cfg = c
	} else {
		cfg = runconfig.Default()
	}
	if set["seed"] {
		cfg.Seed = r.seed
	}
	if set["sources"] {
		if r.sources < 1 || r.sources > 128 {
			return cfg, usagef("--sources %d: want 1..128", r.sources)
		}
		cfg.Sources = r.sources
	}
	if set["rate"] {
		if !(r.rate >= 0) || math.IsInf(r.rate, 0) {
			return cfg, usagef("--rate %v: want a number of crossings per second >= 0", r.rate)
		}
		cfg.RateHz = r.rate
	}
	if set["menu"] {
		cfg.Menu = r.menu
	}
	if set["subject-prefix"] {
		cfg.SubjectPrefix = r.prefix
	}
	if set["duration"] && r.duration <= 0 {
		return cfg, usagef("--duration %v: want a positive duration such as 10s", r.duration)
	}
	if set["crossings"] && r.crossings == 0 {
		return cfg, usagef("--crossings 0: want a positive number of crossings")
	}
	if r.metrics != "" {
		if err := checkHostPort("--metrics-addr", r.metrics); err != nil {
			return cfg, err
		}
	}
	if err := cfg.Validate(); err != nil {
		return cfg, usagef("%v", err)
	}
	return cfg, nil
}

func checkHostPort(flagName, addr string) error {
	host, port, err := net.SplitHostPort(addr)
	if err != nil {
		return usagef("%s %q: want host:port, e.g. 127.0.0.1:9310", flagName, addr)
	}
	if p, err := strconv.Atoi(port); err != nil || p < 0 || p > 65535 {
		return usagef("%s %q: port must be 0..65535", flagName, addr)
	}
	_ = host
	return nil
}

// startCPUProfile starts a CPU profile into the file at path and returns
// the function that stops it and closes the file; that function may be
// called more than once and reports the first call's error. An empty
// path profiles nothing.
func startCPUProfile(path string) (stop func() error, err error) {
	return startCapture(openCPUProfile(path))
}

// startTrace is startCPUProfile for an execution trace (go tool trace).
func startTrace(path string) (stop func() error, err error) {
	return startCapture(openTrace(path))
}

func openCPUProfile(path string) (*profileCapture, error) {
	return openCapture(path, "cpu profile", pprof.StartCPUProfile, pprof.StopCPUProfile)
}

func openTrace(path string) (*profileCapture, error) {
	return openCapture(path, "trace", trace.Start, trace.Stop)
}

func startCapture(r *profileCapture, err error) (stop func() error, _ error) {
	if err != nil {
		return nil, err
	}
	if err := r.start(); err != nil {
		return nil, err
	}
	return r.stop, nil
}

// profileCapture is a CPU profile or an execution trace into a file, created
// when the command starts (so an unwritable path fails before anything
// runs) and begun when the part worth recording starts. A profileCapture is
// used by one goroutine.
type profileCapture struct {
	what    string
	f       *os.File
	begin   func(io.Writer) error
	end     func()
	started bool
	once    sync.Once
	err     error
}

// openCapture creates the file at path for begin and end to record
// into; an empty path gives a profileCapture that records nothing.
func openCapture(path, what string, begin func(io.Writer) error, end func()) (*profileCapture, error) {
	r := &profileCapture{what: what, begin: begin, end: end}
	if path == "" {
		return r, nil
	}
	f, err := os.Create(path)
	if err != nil {
		return nil, fmt.Errorf("cli: %s: %w", what, err)
	}
	r.f = f
	return r, nil
}

// start begins recording; a second call does nothing. On an error the
// file is closed.
func (r *profileCapture) start() error {
	if r.f == nil || r.started {
		return nil
	}
	if err := r.begin(r.f); err != nil {
		r.f.Close()
		r.f = nil
		return fmt.Errorf("cli: %s: %w", r.what, err)
	}
	r.started = true
	return nil
}

// stop ends the recording, if it began, and closes the file. It may be
// called more than once and reports the first call's error.
func (r *profileCapture) stop() error {
	r.once.Do(func() {
		if r.f == nil {
			return
		}
		if r.started {
			r.end()
		}
		if err := r.f.Close(); err != nil {
			r.err = fmt.Errorf("cli: %s: %w", r.what, err)
		}
	})
	return r.err
}
