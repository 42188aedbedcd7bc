package cli

import (
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"strings"
	"time"

	"github.com/bunchsieve/bunchsieve/detector"
	"github.com/bunchsieve/bunchsieve/examples"
	rpt "github.com/bunchsieve/bunchsieve/services/report"
	"github.com/bunchsieve/bunchsieve/services/report/replay"
	"github.com/bunchsieve/bunchsieve/services/usage"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// listFlag collects a repeatable flag.
type listFlag []string

func (l *listFlag) String() string     { return strings.Join(*l, " ") }
func (l *listFlag) Set(v string) error { *l = append(*l, v); return nil }

const replaySynopsis = "--menu FILE (--stream FILE | --generate N [--seed S]) --out DIR [flags]"

func runReplay(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "replay", replaySynopsis)
	menuPath := fs.String("menu", "", "menu `FILE` (default: the built-in examples/menus/starter.yaml)")
	stream := fs.String("stream", "", "replay the recorded stream `FILE`")
	generate := fs.Uint64("generate", 0, "generate `N` crossings instead of reading a stream")
	seed := fs.Uint64("seed", 42, "generator seed (with --generate)")
	genKind := fs.String("generator", detector.GeneratorPhysics, "generator with --generate: physics or simple")
	mu := fs.Float64("mu", 0, "mean pile-up with --generate; 0 takes the generator's default (physics: from 1e34 cm^-2 s^-1)")
	force := fs.String("force", "", "with --generator physics: put this `PROCESS` into every crossing, weighted by its rate ("+strings.Join(detector.ProcessNames(), ", ")+")")
	sources := fs.Int("sources", 0, "calorimeter sources with --generate (default from the detector description)")
	detPath := fs.String("detector", "", "detector description `FILE` with --generate (default: the built-in Lantern description)")
	out := fs.String("out", "", "directory `DIR` for report.json, rates.csv, report.root and the plots")
	set := fs.String("prescale-set", "", "prescale `SET` of the menu (default: its active set)")
	compare := fs.String("compare", "", "also decide with the menu `FILE` and show both menus' rates")
	compareSet := fs.String("compare-prescale-set", "", "prescale `SET` of the --compare menu")
	var scans, effs listFlag
	fs.Var(&scans, "scan", "rate versus threshold, `RULE:PARAM=FROM:TO:STEP` in GeV; PARAM is tN (the N-th energy threshold of the rule) or the quantity compared, such as met (repeatable)")
	fs.Var(&effs, "efficiency", "turn-on curve, `RULE:REF[=FROM:TO:STEP]`; REF is "+strings.Join(rpt.References(), ", ")+" or a feature such as met, ht, jets[0].et (repeatable)")
	scale := fs.String("scale-lumi", "", "also give the rates scaled linearly from luminosity `FROM:TO` (cm^-2 s^-1), e.g. 2e34:5e34")
	cl := fs.Float64("cl", 0.95, "confidence level of the efficiency intervals")
	workers := fs.Int("workers", 0, "lanes reading and building a --stream (0: one fewer than the processors, at least one), or goroutines computing features for --generate (0: 2); the output does not depend on it")
	noProgress := fs.Bool("no-progress", false, "draw no progress bar even on a terminal")
	cpuProfile := fs.String("cpuprofile", "", "write a CPU profile of the replay and the report to `FILE`")
	traceFile := fs.String("trace", "", "write an execution trace (go tool trace) of the replay and the report to `FILE`")
	if err := parse(fs, args, 0); err != nil {
		return err
	}
	given := setFlags(fs)

	opts, err := replayOptions(given, *menuPath, *set, *compare, *compareSet, scans, effs, *scale, *cl, *workers)
	if err != nil {
		return err
	}
	if *out == "" {
		return usagef("--out DIR is required")
	}
	var src replay.Source
	switch {
	case *stream != "" && given["generate"]:
		return usagef("give --stream FILE or --generate N, not both")
	case *stream != "":
		for _, f := range []string{"seed", "generator", "mu", "force", "sources", "detector"} {
			if given[f] {
				return usagef("--%s applies to --generate only: the stream file fixes it", f)
			}
		}
		s, err := replay.OpenStream(*stream)
		if err != nil {
			return err
		}
		defer s.Close()
		src = s
	case given["generate"]:
		if *generate == 0 {
			return usagef("--generate 0: want a positive number of crossings")
		}
		gc, err := generatorConfig(given, *genKind, *mu, *force)
		if err != nil {
			return err
		}
		var desc *detector.Description
		if *detPath != "" {
			if desc, err = detector.LoadDescription(*detPath); err != nil {
				return err
			}
		}
		if given["sources"] && (*sources < 1 || *sources > 128) {
			return usagef("--sources %d: want 1..128", *sources)
		}
		g, err := replay.NewGeneratorSource(replay.GeneratorConfig{Description: desc, Generator: gc, Seed: *seed,
			Crossings: *generate, CaloSources: *sources, Workers: opts.Workers})
		if err != nil {
			return err
		}
		src = g
	default:
		return usagef("give --stream FILE or --generate N (see bunchsieve replay --help)")
	}
	stopProfile, err := startCPUProfile(*cpuProfile)
	if err != nil {
		return err
	}
	defer stopProfile() // on the early returns; a second call does nothing
	stopTrace, err := startTrace(*traceFile)
	if err != nil {
		return err
	}
	defer stopTrace()
	if err := os.MkdirAll(*out, 0o755); err != nil {
		return err
	}
	opts.RootFile = filepath.Join(*out, rpt.ROOTFile)
	opts.Producer = "bunchsieve " + Version
	var bar *rpt.Progress
	if !*noProgress && isTerminal(e.stderr) {
		bar = rpt.NewProgress(e.stderr)
		opts.Progress = bar.Update
	}
	began, beganCPU := time.Now(), usage.Process()
	rep, runErr := rpt.Run(ctx, src, opts)
	if bar != nil && rep != nil {
		bar.Done(rep.Processing.Crossings)
	}
	if rep == nil {
		if errors.Is(runErr, rpt.ErrBadSpec) {
			// A --scan or --efficiency naming what the menu lacks is a
			// mistake in the flags, found before anything was replayed.
			return usagef("%v", runErr)
		}
		return runErr
	}
	err = rep.WriteFiles(*out)
	if perr := stopProfile(); err == nil {
		err = perr
	}
	if err != nil {
		return err
	}
	if err := rep.WriteTable(e.stdout); err != nil {
		return err
	}
	took, cpu := time.Since(began), usage.Process().Sub(beganCPU)
	fmt.Fprintf(e.stdout, "\nwrote %s, %s, %s and %s (PNG and SVG) to %s\n",
		rpt.JSONFile, rpt.CSVFile, rpt.ROOTFile, plots(len(rep.PlotFiles())), *out)
	fmt.Fprintln(e.stdout, throughputLine(rep.Processing.Crossings, took, cpu, given["generate"]))
	return runErr
}

// plots counts the plots written, in the singular for one.
func plots(n int) string {
	if n == 1 {
		return "1 plot"
	}
	return fmt.Sprintf("%d plots", n)
}

// throughputLine says how fast a replay went: events over the wall time
// from the first read (or generated crossing) to the last file written,
// and the processor time of the whole process per event where the
// system accounts it. Both include the report's fixed costs (plots,
// files), which dominate a short replay.
func throughputLine(events uint64, took time.Duration, cpu usage.CPU, generated bool) string {
	what := "reading"
	if generated {
		what = "generating"
	}
	line := fmt.Sprintf("replayed %d events in %.2f s, %s, building, selecting and writing the report", events, took.Seconds(), what)
	if events == 0 || took <= 0 {
		return line
	}
	line += fmt.Sprintf(": %.0f events/s", float64(events)/took.Seconds())
	if usage.Available && cpu.Total() > 0 {
		line += fmt.Sprintf(", %.1f µs of processor time per event", float64(cpu.Total().Microseconds())/float64(events))
	}
	return line
}

// replayOptions reads the menus and the report's sections.
func replayOptions(given map[string]bool, menuPath, set, compare, compareSet string, scans, effs []string, scale string, cl float64, workers int) (rpt.Options, error) {
	var opts rpt.Options
	var err error
	opts.Menu, opts.MenuSource, err = loadMenu(menuPath)
	if err != nil {
		return opts, err
	}
	if set != "" {
		if _, err := opts.Menu.Prescales(set); err != nil {
			return opts, usagef("--prescale-set: %v", err)
		}
		opts.PrescaleSet = set
	}
	if compare != "" {
		if opts.Compare, _, err = loadMenu(compare); err != nil {
			return opts, err
		}
		if compareSet != "" {
			if _, err := opts.Compare.Prescales(compareSet); err != nil {
				return opts, usagef("--compare-prescale-set: %v", err)
			}
			opts.ComparePrescaleSet = compareSet
		}
	} else if compareSet != "" {
		return opts, usagef("--compare-prescale-set needs --compare FILE")
	}
	for _, s := range scans {
		sp, err := rpt.ParseScan(s)
		if err != nil {
			return opts, usagef("--scan: %v", trimPrefix(err))
		}
		opts.Scans = append(opts.Scans, sp)
	}
	for _, s := range effs {
		sp, err := rpt.ParseEfficiency(s)
		if err != nil {
			return opts, usagef("--efficiency: %v", trimPrefix(err))
		}
		opts.Efficiencies = append(opts.Efficiencies, sp)
	}
	if scale != "" {
		ls, err := rpt.ParseLumiScale(scale)
		if err != nil {
			return opts, usagef("--scale-lumi: %v", trimPrefix(err))
		}
		opts.Scale = &ls
	}
	if !(cl > 0 && cl < 1) {
		return opts, usagef("--cl %v: want a confidence level between 0 and 1, such as 0.95", cl)
	}
	opts.ConfidenceLevel = cl
	if workers < 0 || workers > 64 {
		return opts, usagef("--workers %d: want 1..64, or 0 for the default", workers)
	}
	opts.Workers = workers
	return opts, nil
}

// trimPrefix drops the sentinel's text from a specification error, whose
// message already says what is wrong.
func trimPrefix(err error) string {
	return strings.TrimPrefix(err.Error(), rpt.ErrBadSpec.Error()+": ")
}

// loadMenu reads a menu file, or the built-in starter menu for "".
func loadMenu(path string) (*trigger.Menu, []byte, error) {
	var data []byte
	var err error
	name := path
	if path == "" {
		name = "examples/" + examples.StarterMenu
		data, err = fs.ReadFile(examples.FS, examples.StarterMenu)
	} else {
		data, err = os.ReadFile(path)
	}
	if err != nil {
		return nil, nil, err
	}
	m, err := trigger.ParseMenu(name, data)
	if err != nil {
		return nil, nil, err
	}
	return m, data, nil
}

func generatorConfig(given map[string]bool, kind string, mu float64, force string) (detector.GeneratorConfig, error) {
	var gc detector.GeneratorConfig
	if !(mu >= 0) || math.IsInf(mu, 0) {
		return gc, usagef("--mu %v: want a mean pile-up >= 0", mu)
	}
	switch kind {
	case detector.GeneratorPhysics:
		gc.Kind = kind
		gc.Physics.Mu, gc.Physics.Force = mu, force
	case detector.GeneratorSimple:
		if given["force"] {
			return gc, usagef("--force needs --generator physics")
		}
		gc.Kind = kind
		gc.Simple.Mu = mu
	default:
		return gc, usagef("--generator %q: want physics or simple", kind)
	}
	if err := gc.Validate(); err != nil {
		return gc, usagef("%v", err)
	}
	return gc, nil
}

// isTerminal reports whether w is a terminal (a character device).
func isTerminal(w io.Writer) bool {
	f, ok := w.(*os.File)
	if !ok {
		return false
	}
	info, err := f.Stat()
	return err == nil && info.Mode()&os.ModeCharDevice != 0
}
