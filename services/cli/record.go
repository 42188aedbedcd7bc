package cli

import (
	"context"
	"flag"
	"fmt"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"go.yaml.in/yaml/v3"

	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/emulator"
	"github.com/bunchsieve/bunchsieve/services/recording"
	"github.com/bunchsieve/bunchsieve/services/runconfig"
)

func runRecord(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "record", "--crossings N --out FILE [flags]")
	var rf runFlags
	recordFlags(fs, &rf)
	out := fs.String("out", "", "stream `FILE` to write")
	partitions := fs.Int("builders", 1, "number of builder shares to split the crossings into")
	var faults faultFlags
	fs.Var(&faults, "fault", faultHelp)
	if err := parse(fs, args, 0); err != nil {
		return err
	}
	set := setFlags(fs)
	cfg, err := rf.resolve(set)
	if err != nil {
		return err
	}
	if *out == "" {
		return usagef("--out FILE is required")
	}
	if rf.crossings == 0 && rf.duration == 0 {
		return usagef("give --crossings N (or --duration) so the recording ends")
	}
	if *partitions < 1 {
		return usagef("--builders %d: want >= 1", *partitions)
	}
	cfg.Faults = append(cfg.Faults, faults...)
	gen, part, sources, err := newGenerator(cfg)
	if err != nil {
		return err
	}
	h, err := streamHeader(cfg, sources, *partitions, "bunchsieve "+Version)
	if err != nil {
		return err
	}
	// The truth of every crossing goes into the file too, so that offline
	// efficiencies (bunchsieve replay --efficiency RULE:truth-...) work on
	// recorded streams.
	w, err := recording.CreateWithTruth(*out, h)
	if err != nil {
		return err
	}
	emu, err := emulator.New(emulator.Config{
		Run: cfg.Run, Seed: cfg.Seed, Crossings: rf.crossings, BatchCrossings: cfg.BatchCrossings,
		Partitions: *partitions, Faults: cfg.Faults, Partition: part,
	}, recording.RecordTruth(gen, w), sources, emulator.FileSink{W: w}, prometheus.NewRegistry())
	if err != nil {
		w.Close()
		return err
	}
	if rf.duration > 0 {
		var cancel context.CancelFunc
		ctx, cancel = context.WithTimeout(ctx, rf.duration)
		defer cancel()
	}
	start := time.Now()
	runErr := emu.Run(ctx)
	w.AddCrossings(emu.Offered())
	if err := w.Close(); err != nil {
		return err
	}
	t := w.Trailer()
	fmt.Fprintf(e.stdout, "record: %d crossings, %d batches, %d fragments to %s in %.2fs\n",
		t.Crossings, t.Batches, t.Fragments, *out, time.Since(start).Seconds())
	return runErr
}

// recordFlags registers on fs the run flags that apply to a recording,
// as the other commands that generate crossings describe them. Left out,
// so that the help lists only what record does: the offered rate
// (crossings are written as fast as they are made, and the file keeps the
// crossings' own times, so a pace would mean nothing to whoever replays
// it), the metrics address (nothing is served), the subject prefix (no
// NATS) and the summary file (none is written).
func recordFlags(fs *flag.FlagSet, rf *runFlags) {
	someRunFlags(fs, rf, true, "config", "sources", "seed", "crossings", "duration")
}

// someRunFlags registers on fs the run flags names only, described as
// everywhere else (generator: with the flags of commands that generate
// crossings).
func someRunFlags(fs *flag.FlagSet, rf *runFlags, generator bool, names ...string) {
	all := flag.NewFlagSet(fs.Name(), flag.ContinueOnError)
	rf.register(all, "", generator)
	for _, name := range names {
		f := all.Lookup(name)
		fs.Var(f.Value, f.Name, f.Usage)
	}
}

// streamHeader is the header of a stream file of the run cfg describes:
// its detector description, generator settings, sources and builder
// shares, written by producer.
func streamHeader(cfg runconfig.Config, sources []uint32, partitions int, producer string) (*pb.StreamHeader, error) {
	genYAML, err := yaml.Marshal(cfg.Generator)
	if err != nil {
		return nil, fmt.Errorf("encode generator settings: %w", err)
	}
	detYAML := detector.BuiltinDescriptionYAML()
	if cfg.Detector != "" {
		if detYAML, err = readFile(cfg.Detector); err != nil {
			return nil, err
		}
	}
	return &pb.StreamHeader{
		Run: cfg.Run, Seed: cfg.Seed, SourceIds: sources, Partitions: uint32(partitions),
		BatchCrossings: uint32(cfg.BatchCrossings), Generator: generatorKind(cfg.Generator.Kind), GeneratorConfig: string(genYAML),
		Detector: string(detYAML), CreatedUnixNs: time.Now().UnixNano(), Producer: producer,
	}, nil
}

func generatorKind(k string) string {
	if k == "" {
		return detector.GeneratorSimple
	}
	return k
}
