package loadtest

import (
	"context"
	"errors"
	"fmt"
	"io"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"google.golang.org/protobuf/encoding/protowire"

	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/emulator"
	"github.com/bunchsieve/bunchsieve/services/recording"
)

// Dataset is a readout stream held in memory, made once before anything is
// measured: the fragment batches exactly as they go on the wire, in the
// order the readout publishes them, each followed by room for its publish
// time. Replaying it costs a copy into the NATS write buffer per batch and
// nothing else. Once made, a Dataset is only read, except that a Feed
// writes the publish time into that spare room: any number of goroutines
// may read it, but run one Feed on it at a time.
type Dataset struct {
	Run        uint32
	Sources    []uint32
	Partitions int
	// Crossings is the number of crossings in the stream.
	Crossings uint64
	// Batches holds the fragment batches in publish order; Ends the
	// end-of-run markers, one per source and builder share.
	Batches []Batch
	Ends    []Batch
	// Fragments and Bytes total the batches (not the markers); Bytes
	// counts the encodings as published.
	Fragments uint64
	Bytes     int64
	// LapOrbits is how many orbits the stream spans. A run longer than the
	// stream replays it again shifted by this many orbits (see Restamper).
	LapOrbits uint64
	// Description is the detector the fragments were made for.
	Description *detector.Description

	slotIndex []int32 // bcid -> position among the colliding slots, or -1
	// chunks hold the batches' encodings back to back. A Batch holds no
	// pointer, only where its bytes are: a dataset of millions of small
	// batches held as that many objects, or as a slice of that many
	// pointers, costs the garbage collector a long mark phase in every
	// cycle, and the steps would measure the collector in their latency
	// tail.
	chunks [][]byte
}

// chunkBytes is the size of a Dataset's chunks.
const chunkBytes = 4 << 20

// Batch is one encoded FragmentBatch of a Dataset.
type Batch struct {
	Partition int
	Source    uint32
	// Due is the number of crossings offered once this batch may go out:
	// one more than the index of its last crossing.
	Due       uint64
	Fragments int
	// The encoding followed by a spare sent_unix_ns field (see stampRoom)
	// that the feed overwrites with the publish time: n bytes at off in
	// the dataset's chunk (see Dataset.Data).
	chunk, off, n uint32
}

// Data returns b's encoding followed by its stamp room; b must be one of
// ds's batches or markers. The bytes are ds's own: only a Feed may write
// them, and only the stamp room.
func (ds *Dataset) Data(b *Batch) []byte {
	end := b.off + b.n
	return ds.chunks[b.chunk][b.off:end:end]
}

// Protobuf decoders take the last occurrence of a scalar field, so a
// sent_unix_ns field appended after the batch overrides the one inside it
// and a batch is restamped without being decoded (as emulator.Replay
// does). stampRoom is its size: a one-byte tag and a nine-byte varint,
// which holds every Unix time in ns from 2^56 ns (early 1972) to 2^63 ns
// (year 2262).
const (
	stampRoom = 1 + 9
	sentField = 4
)

// appendStamp appends a sent_unix_ns field of the given time to b.
func appendStamp(b []byte, unixNs int64) []byte {
	b = protowire.AppendTag(b, sentField, protowire.VarintType)
	return protowire.AppendVarint(b, uint64(unixNs))
}

// GenerateConfig says what stream Generate makes. The zero value of each
// field is explained beside it.
type GenerateConfig struct {
	// Description is the detector; nil means detector.DefaultDescription().
	Description *detector.Description
	// Sources is the number of calorimeter sources; zero means 16. A
	// generator that models muons adds the geometry's muon sources, as a
	// run of the chain does.
	Sources int
	// Crossings is the stream's length; zero means 100,000.
	Crossings uint64
	// BatchCrossings is how many crossings a batch carries; zero means 32.
	BatchCrossings int
	// Partitions is the number of builder shares; zero means 1.
	Partitions int
	// Run is the run number; zero means 1.
	Run uint32
	// Seed seeds the toy generator.
	Seed uint64
	// Generator selects and sets the generator; its zero value is the toy
	// generator's default model (mean pile-up 20).
	Generator detector.GeneratorConfig
}

// Generate makes a stream with the readout emulator and the toy generator,
// as `bunchsieve up` does, keeping the batches in memory.
func Generate(cfg GenerateConfig) (*Dataset, error) {
	if cfg.Description == nil {
		cfg.Description = detector.DefaultDescription()
	}
	if cfg.Sources == 0 {
		cfg.Sources = 16
	}
	if cfg.Crossings == 0 {
		cfg.Crossings = 100_000
	}
	if cfg.Run == 0 {
		cfg.Run = 1
	}
	if cfg.Partitions == 0 {
		cfg.Partitions = 1
	}
	part, err := detector.NewPartition(cfg.Description.Geometry, cfg.Sources)
	if err != nil {
		return nil, fmt.Errorf("loadtest: %w", err)
	}
	gen, err := detector.NewGenerator(cfg.Description, part, cfg.Seed, cfg.Generator)
	if err != nil {
		return nil, fmt.Errorf("loadtest: %w", err)
	}
	sources := part.SourceIDs()
	if k := cfg.Generator.Kind; k != "" && k != detector.GeneratorSimple {
		sources = part.AllSourceIDs()
	}
	ds := newDataset(cfg.Description, cfg.Run, sources, cfg.Partitions)
	emu, err := emulator.New(emulator.Config{
		Run: cfg.Run, Seed: cfg.Seed, Crossings: cfg.Crossings, BatchCrossings: cfg.BatchCrossings, Partitions: cfg.Partitions,
		Partition: part,
	}, gen, ds.Sources, memorySink{ds}, prometheus.NewRegistry())
	if err != nil {
		return nil, fmt.Errorf("loadtest: %w", err)
	}
	if err := emu.Run(context.Background()); err != nil {
		return nil, fmt.Errorf("loadtest: generate: %w", err)
	}
	if err := ds.finish(); err != nil {
		return nil, err
	}
	return ds, nil
}

// Load reads a recorded stream file (bunchsieve record) into memory.
func Load(path string) (*Dataset, error) {
	r, err := recording.Open(path)
	if err != nil {
		return nil, fmt.Errorf("loadtest: %w", err)
	}
	defer r.Close()
	h := r.Header()
	desc := detector.DefaultDescription()
	if h.Detector != "" {
		if desc, err = detector.ParseDescription(path+" (header)", []byte(h.Detector)); err != nil {
			return nil, fmt.Errorf("loadtest: %w", err)
		}
	}
	ds := newDataset(desc, h.Run, append([]uint32(nil), h.SourceIds...), max(int(h.Partitions), 1))
	sink := memorySink{ds}
	for {
		b, err := r.Next()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return nil, fmt.Errorf("loadtest: %w", err)
		}
		if err := sink.Send(b.Partition, b.SourceID, b.FirstTimestampNs, b.Data, b.Fragments); err != nil {
			return nil, err
		}
	}
	if len(ds.Ends) == 0 {
		// A stream cut short has no markers: make them.
		for p := 0; p < ds.Partitions; p++ {
			for _, id := range ds.Sources {
				b := Batch{Partition: p, Source: id}
				ds.keep(&b, endMarker(ds.Run, id), time.Now().UnixNano())
				ds.Ends = append(ds.Ends, b)
			}
		}
	}
	if err := ds.finish(); err != nil {
		return nil, err
	}
	return ds, nil
}

func newDataset(d *detector.Description, run uint32, sources []uint32, partitions int) *Dataset {
	return &Dataset{Run: run, Sources: sources, Partitions: partitions, Description: d}
}

// endMarker encodes an end-of-run FragmentBatch.
func endMarker(run, source uint32) []byte {
	var b []byte
	b = protowire.AppendTag(b, 1, protowire.VarintType)
	b = protowire.AppendVarint(b, uint64(source))
	if run != 0 {
		b = protowire.AppendTag(b, 2, protowire.VarintType)
		b = protowire.AppendVarint(b, uint64(run))
	}
	b = protowire.AppendTag(b, 6, protowire.VarintType)
	return protowire.AppendVarint(b, 1)
}

// finish works out the stream's length from its batches.
func (ds *Dataset) finish() error {
	if len(ds.Batches) == 0 {
		return errors.New("loadtest: the stream holds no fragment batches")
	}
	nb := uint64(ds.Description.Filling.Colliding())
	maxOrbit := uint64(0)
	for _, b := range ds.Batches {
		ds.Crossings = max(ds.Crossings, b.Due)
		maxOrbit = max(maxOrbit, (b.Due-1)/nb)
	}
	ds.LapOrbits = maxOrbit + 1
	return nil
}

// memorySink keeps the emulator's batches in the Dataset.
type memorySink struct{ ds *Dataset }

// Send copies one batch into the dataset; end-of-run markers are kept
// apart, to go out after the last lap.
func (s memorySink) Send(partition int, source uint32, _ int64, data []byte, fragments int) error {
	info, err := inspectBatch(data)
	if err != nil {
		return fmt.Errorf("loadtest: batch of source %d: %w", source, err)
	}
	b := Batch{Partition: partition, Source: source, Fragments: fragments}
	s.ds.keep(&b, data, time.Now().UnixNano())
	if info.fragments == 0 {
		if info.endOfRun {
			s.ds.Ends = append(s.ds.Ends, b)
		}
		return nil
	}
	n, ok := s.ds.crossingIndex(info.lastOrbit, info.lastBcid)
	if !ok {
		return fmt.Errorf("loadtest: batch of source %d ends with bcid %d, not a colliding slot of the filling scheme", source, info.lastBcid)
	}
	b.Due = n + 1
	b.Fragments = info.fragments
	s.ds.Batches = append(s.ds.Batches, b)
	s.ds.Fragments += uint64(info.fragments)
	s.ds.Bytes += int64(b.n)
	return nil
}

// Flush does nothing.
func (memorySink) Flush() error { return nil }

// keep copies data followed by a stamp of sentNs into ds's chunks and
// points b at the copy.
func (ds *Dataset) keep(b *Batch, data []byte, sentNs int64) {
	n := len(data) + stampRoom
	last := len(ds.chunks) - 1
	if last < 0 || cap(ds.chunks[last])-len(ds.chunks[last]) < n {
		ds.chunks = append(ds.chunks, make([]byte, 0, max(chunkBytes, n)))
		last++
	}
	c := ds.chunks[last]
	b.chunk, b.off = uint32(last), uint32(len(c))
	c = appendStamp(append(c, data...), sentNs)
	b.n = uint32(len(c)) - b.off
	ds.chunks[last] = c
}

// crossingIndex returns the run's crossing number of (orbit, bcid): the
// inverse of FillingScheme.Crossing.
func (ds *Dataset) crossingIndex(orbit uint64, bcid uint32) (uint64, bool) {
	fs := ds.Description.Filling
	if ds.slotIndex == nil {
		ds.slotIndex = make([]int32, detector.SlotsPerOrbit)
		k := int32(0)
		for b := range ds.slotIndex {
			ds.slotIndex[b] = -1
			if fs.Collides(uint32(b)) {
				ds.slotIndex[b] = k
				k++
			}
		}
	}
	if bcid >= detector.SlotsPerOrbit || ds.slotIndex[bcid] < 0 {
		return 0, false
	}
	return orbit*uint64(fs.Colliding()) + uint64(ds.slotIndex[bcid]), true
}

// batchInfo is what inspectBatch reads of an encoded FragmentBatch.
type batchInfo struct {
	fragments int
	endOfRun  bool
	lastOrbit uint64
	lastBcid  uint32
}

// inspectBatch counts a batch's fragments and reads the crossing of the
// last one, without decoding the rest.
func inspectBatch(data []byte) (batchInfo, error) {
	var info batchInfo
	var last []byte
	for len(data) > 0 {
		num, typ, n := pb.ConsumeTag(data)
		if n < 0 {
			return info, protowire.ParseError(n)
		}
		data = data[n:]
		if num == 5 && typ == protowire.BytesType {
			f, n := protowire.ConsumeBytes(data)
			if n < 0 {
				return info, protowire.ParseError(n)
			}
			data = data[n:]
			info.fragments++
			last = f
			continue
		}
		if num == 6 && typ == protowire.VarintType {
			v, n := protowire.ConsumeVarint(data)
			if n < 0 {
				return info, protowire.ParseError(n)
			}
			data = data[n:]
			info.endOfRun = v != 0
			continue
		}
		n = protowire.ConsumeFieldValue(num, typ, data)
		if n < 0 {
			return info, protowire.ParseError(n)
		}
		data = data[n:]
	}
	for len(last) > 0 {
		num, typ, n := pb.ConsumeTag(last)
		if n < 0 {
			return info, protowire.ParseError(n)
		}
		last = last[n:]
		if typ == protowire.VarintType && (num == 3 || num == 4) {
			v, n := protowire.ConsumeVarint(last)
			if n < 0 {
				return info, protowire.ParseError(n)
			}
			last = last[n:]
			if num == 3 {
				info.lastOrbit = v
			} else {
				info.lastBcid = uint32(v)
			}
			continue
		}
		n = protowire.ConsumeFieldValue(num, typ, last)
		if n < 0 {
			return info, protowire.ParseError(n)
		}
		last = last[n:]
	}
	return info, nil
}
