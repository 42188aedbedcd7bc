package report

import (
	"context"
	"errors"
	"fmt"

	"github.com/bunchsieve/bunchsieve/detector"
	"github.com/bunchsieve/bunchsieve/services/report/replay"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// Options sets up Run. Menu is required; every other field works at its
// zero value.
type Options struct {
	// Menu is the menu the report is about; MenuSource its text, needed
	// only for Scans (the scanned conditions are compiled by re-parsing
	// it with extra rules).
	Menu       *trigger.Menu
	MenuSource []byte
	// PrescaleSet is the prescale set applied; empty means the menu's
	// active set.
	PrescaleSet string
	// Compare, when set, is decided on the same events and put beside
	// Menu; ComparePrescaleSet as PrescaleSet.
	Compare            *trigger.Menu
	ComparePrescaleSet string
	// Scans, Efficiencies and Scale ask for the optional sections.
	Scans        []ScanSpec
	Efficiencies []EfficiencySpec
	Scale        *LumiScale
	// ConfidenceLevel of the efficiency intervals; zero means 0.95.
	ConfidenceLevel float64
	// Workers is the number of lanes a stream replays on, or of feature
	// workers for a generator (replay.Config.Workers); zero means its
	// default.
	Workers int
	// RootFile, when set, is the ROOT file written during the run: a tree
	// with one entry per event, and the histograms of the scans and
	// turn-on curves.
	RootFile string
	// Progress is passed to the replay (replay.Config.Progress).
	Progress func(events uint64, done float64)
	// Producer names the program in the report, such as "bunchsieve dev".
	Producer string
}

// ErrNoMenu is returned by Run without Options.Menu.
var ErrNoMenu = errors.New("report: no menu")

// Run replays src through the menu (and the menu to compare, if any) and
// builds the report. Runs with distinct sources may proceed concurrently;
// a source serves one Run. With RootFile set it writes the ROOT file as well. A
// stream damaged part way is reported over what was read, with
// Processing.InputError set; Run then returns the report and an error
// wrapping ErrDamagedInput.
func Run(ctx context.Context, src replay.Source, opts Options) (*Report, error) {
	if opts.Menu == nil {
		return nil, ErrNoMenu
	}
	if opts.ConfidenceLevel == 0 {
		opts.ConfidenceLevel = 0.95
	}
	if !(opts.ConfidenceLevel > 0 && opts.ConfidenceLevel < 1) {
		return nil, fmt.Errorf("%w: confidence level %v, want 0 < cl < 1", ErrBadSpec, opts.ConfidenceLevel)
	}
	sample := src.Sample()
	acc, cfg, err := newAccumulator(opts, sample)
	if err != nil {
		return nil, err
	}
	if opts.RootFile != "" {
		if acc.tree, err = newTreeWriter(opts.RootFile, acc, cfg.Values); err != nil {
			return nil, err
		}
	}
	cfg.Workers = opts.Workers
	cfg.Progress = opts.Progress
	sum, runErr := replay.Run(ctx, src, cfg, acc.add)
	if runErr != nil {
		if acc.tree != nil {
			acc.tree.abort()
		}
		return nil, runErr
	}
	rep := acc.report(sum)
	if acc.tree != nil {
		if err := acc.tree.finish(rep); err != nil {
			return nil, err
		}
	}
	if sum.InputError != "" {
		return rep, fmt.Errorf("%w: %s", ErrDamagedInput, sum.InputError)
	}
	return rep, nil
}

// ErrDamagedInput is wrapped by Run's error when a stream ended in damage:
// the report then covers what was read before it.
var ErrDamagedInput = errors.New("report: input damaged")

// crossingRate returns the colliding-crossing rate of a description:
// filled bunches times the revolution frequency.
func crossingRate(d *detector.Description) float64 { return d.Filling.CrossingRateHz() }
