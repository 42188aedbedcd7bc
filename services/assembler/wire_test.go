package assembler

import (
	"context"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/prometheus/client_golang/prometheus"
	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"

	"github.com/bunchsieve/bunchsieve/builder"
	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/emulator"
	"github.com/bunchsieve/bunchsieve/services/transport"
)

// collect keeps the emulator's batches.
type collect struct{ batches [][]byte }

func (c *collect) Send(_ int, _ uint32, _ int64, data []byte, _ int) error {
	c.batches = append(c.batches, append([]byte(nil), data...))
	return nil
}
func (c *collect) Flush() error { return nil }

// sampleBatches returns the encoded batches of crossings toy-generator
// crossings of 16 sources, end-of-run markers included.
func sampleBatches(tb testing.TB, crossings uint64, faults []emulator.Fault) [][]byte {
	tb.Helper()
	gen, part := toyGenerator(tb, 5)
	var c collect
	emu, err := emulator.New(emulator.Config{Crossings: crossings, Faults: faults}, gen, part.SourceIDs(), &c, prometheus.NewRegistry())
	if err != nil {
		tb.Fatal(err)
	}
	if err := emu.Run(context.Background()); err != nil {
		tb.Fatal(err)
	}
	return c.batches
}

// withoutBadFragments returns data without the fragment fields whose bytes
// proto.Unmarshal refuses as a Fragment, and how many it left out; ok is
// false when the batch's own framing does not parse.
func withoutBadFragments(data []byte) (kept []byte, bad int, ok bool) {
	for len(data) > 0 {
		num, typ, n := protowire.ConsumeTag(data)
		if n < 0 {
			return nil, 0, false
		}
		m := protowire.ConsumeFieldValue(num, typ, data[n:])
		if m < 0 {
			return nil, 0, false
		}
		field := data[:n+m]
		if num == batchFragments && typ == protowire.BytesType {
			raw, _ := protowire.ConsumeBytes(data[n:])
			if proto.Unmarshal(raw, new(pb.Fragment)) != nil {
				bad++
				field = nil
			}
		}
		kept = append(kept, field...)
		data = data[n+m:]
	}
	return kept, bad, true
}

// checkAgainstProto decodes data with the fast decoder and with
// proto.Unmarshal (the reference) and fails unless both refuse it or both
// give the same batch. A fragment proto refuses on its own leaves the
// batch to be compared without it, and must be counted undecodable. It
// returns how many fragments were checksummed in decoding and how many of
// those were found damaged.
func checkAgainstProto(t *testing.T, data []byte) (checked, damaged int) {
	t.Helper()
	ref, bad, framed := withoutBadFragments(data)
	var want pb.FragmentBatch
	werr := proto.Unmarshal(ref, &want)
	if !framed {
		werr = proto.Unmarshal(data, &want)
		if werr == nil {
			t.Fatal("proto decodes a batch whose framing the reference reader refuses")
		}
	}
	p := newFragmentPool()
	var got wireBatch
	gerr := decodeBatch(data, &got, p)
	if (werr != nil) != (gerr != nil) {
		t.Fatalf("proto.Unmarshal error %v, fast decoder error %v", werr, gerr)
	}
	if werr != nil {
		return 0, 0
	}
	if got.undecodable != bad {
		t.Fatalf("%d fragments counted undecodable, proto refuses %d", got.undecodable, bad)
	}
	if got.sourceID != want.SourceId || got.sentUnixNs != want.SentUnixNs || got.endOfRun != want.EndOfRun {
		t.Fatalf("batch fields: got source %d sent %d end %v, want %d %d %v", got.sourceID, got.sentUnixNs, got.endOfRun, want.SourceId, want.SentUnixNs, want.EndOfRun)
	}
	if len(got.frags) != len(want.Fragments) {
		t.Fatalf("%d fragments, proto has %d", len(got.frags), len(want.Fragments))
	}
	for i, h := range got.frags {
		w := want.Fragments[i]
		if h.checked {
			// The payload was checksummed, not decoded: the header and
			// the verdict must be proto's (Fragment.Intact on proto's
			// decoding, Checksummer.Sum).
			if h.frag.Payload != nil || w.GetCalo() == nil || h.intact != w.Intact() {
				t.Fatalf("fragment %d: checked, payload %v, intact %v; proto: %v, intact %v", i, h.frag.Payload, h.intact, w, w.Intact())
			}
			w = proto.Clone(w).(*pb.Fragment)
			w.Payload = nil
			checked++
			if !h.intact {
				damaged++
			}
		}
		if !proto.Equal(&h.frag, w) {
			t.Fatalf("fragment %d: got %v, proto %v", i, &h.frag, w)
		}
		// The bytes kept are the fragment's own encoding.
		var again pb.Fragment
		if err := proto.Unmarshal(h.raw, &again); err != nil || !proto.Equal(&again, want.Fragments[i]) {
			t.Fatalf("fragment %d: kept bytes decode to %v (%v)", i, &again, err)
		}
	}
	return checked, damaged
}

// The fast decoder gives what proto.Unmarshal (google.golang.org/protobuf,
// the reference decoder) gives for every batch the readout writes, faults
// included.
func TestDecodeBatchMatchesProto(t *testing.T) {
	faults := []emulator.Fault{{Drop: 0.02, Duplicate: 0.02, Corrupt: 0.01, Reorder: 0.02}}
	checked, damaged := 0, 0
	for _, data := range sampleBatches(t, 600, faults) {
		c, d := checkAgainstProto(t, data)
		checked, damaged = checked+c, damaged+d
	}
	// Both verdicts of the checksum taken in decoding were exercised.
	if checked == 0 || damaged == 0 || damaged == checked {
		t.Fatalf("%d fragments checksummed in decoding, %d of them damaged", checked, damaged)
	}
}

// Batches of the physics generator, muon sectors included, decode as
// proto.Unmarshal decodes them: the muon payloads take the fast path too.
func TestDecodeMuonBatchesMatchProto(t *testing.T) {
	d := detector.DefaultDescription()
	part, err := detector.NewPartition(d.Geometry, 16)
	if err != nil {
		t.Fatal(err)
	}
	gen, err := detector.NewGenerator(d, part, 5, detector.GeneratorConfig{Kind: detector.GeneratorPhysics, Physics: detector.PhysicsConfig{Force: "z-mumu"}})
	if err != nil {
		t.Fatal(err)
	}
	var c collect
	emu, err := emulator.New(emulator.Config{Crossings: 96, Partition: part}, gen, part.AllSourceIDs(), &c, prometheus.NewRegistry())
	if err != nil {
		t.Fatal(err)
	}
	if err := emu.Run(context.Background()); err != nil {
		t.Fatal(err)
	}
	hits := 0
	for _, data := range c.batches {
		checkAgainstProto(t, data)
		var b pb.FragmentBatch
		_ = proto.Unmarshal(data, &b)
		for _, f := range b.Fragments {
			hits += len(f.GetMuon().GetHits())
		}
	}
	if hits == 0 {
		t.Fatal("no muon hits in the sample")
	}
	// The fast path, not proto's, decoded them.
	p := newFragmentPool()
	var wb wireBatch
	for _, data := range c.batches {
		if err := decodeBatch(data, &wb, p); err != nil {
			t.Fatal(err)
		}
		for _, h := range wb.frags {
			if h.foreign {
				t.Fatalf("fragment of source %d went through proto.Unmarshal", h.frag.SourceId)
			}
			p.put(h)
		}
	}
}

// Layouts the readout does not write but protobuf allows decode as proto
// decodes them: they take proto's path.
func TestDecodeBatchOtherLayouts(t *testing.T) {
	tag := protowire.AppendTag
	v := protowire.AppendVarint
	frag := func(parts ...[]byte) []byte {
		var b []byte
		for _, p := range parts {
			b = append(b, p...)
		}
		return b
	}
	field := func(num protowire.Number, x uint64) []byte { return v(tag(nil, num, protowire.VarintType), x) }
	bytesField := func(num protowire.Number, x []byte) []byte {
		return protowire.AppendBytes(tag(nil, num, protowire.BytesType), x)
	}
	packed := func(xs ...uint64) []byte {
		var b []byte
		for _, x := range xs {
			b = v(b, x)
		}
		return b
	}
	calo := bytesField(1, packed(5, 300, 7))
	calo = append(calo, bytesField(2, packed(1, 2, 70000))...)
	base := frag(field(1, 3), field(2, 1), field(3, 9), field(4, 120), field(5, 1234567))
	muonHit := frag(field(1, 2), protowire.AppendFixed32(tag(nil, 2, protowire.Fixed32Type), 0x3f800000))
	cases := map[string][]byte{
		"canonical":         frag(base, bytesField(7, calo), field(9, 77)),
		"unpacked towers":   frag(base, bytesField(7, frag(field(1, 5), field(1, 6), field(2, 9), field(2, 10))), field(9, 1)),
		"split packed":      frag(base, bytesField(7, frag(bytesField(1, packed(1)), bytesField(2, packed(2)), bytesField(1, packed(3)))), field(9, 1)),
		"calo twice":        frag(base, bytesField(7, calo), bytesField(7, calo)),
		"muon":              frag(base, bytesField(8, bytesField(1, muonHit))),
		"calo then muon":    frag(base, bytesField(7, calo), bytesField(8, bytesField(1, muonHit))),
		"unknown field":     frag(base, field(15, 4), bytesField(7, calo)),
		"repeated scalars":  frag(base, field(1, 4), field(3, 11), bytesField(7, calo)),
		"wide value":        frag(field(1, 1<<40), bytesField(7, bytesField(1, packed(1<<35)))),
		"wrong wire type":   frag(base, protowire.AppendFixed64(tag(nil, 3, protowire.Fixed64Type), 9)),
		"empty payload":     frag(base, bytesField(7, nil)),
		"nothing":           nil,
		"truncated varint":  frag(base, []byte{0x48, 0x80}),
		"payload too long":  frag(base, []byte{0x3a, 0x20, 0x08}),
		"field number zero": frag([]byte{0x00, 0x01}),
		"bad packed varint": frag(base, bytesField(7, bytesField(1, []byte{0x80}))),
	}
	for name, f := range cases {
		t.Run(name, func(t *testing.T) {
			batch := frag(field(1, 3), field(3, 2), bytesField(5, f), bytesField(5, f), field(4, 99), field(6, 1))
			checkAgainstProto(t, batch)
			// Batch-level oddities: unknown fields and a wrong wire type.
			checkAgainstProto(t, frag(bytesField(14, []byte("x")), batch, protowire.AppendFixed32(tag(nil, 5, protowire.Fixed32Type), 1)))
		})
	}
}

// FuzzDecodeBatch checks the fast decoder against proto.Unmarshal on
// arbitrary bytes, seeded with real batches.
func FuzzDecodeBatch(f *testing.F) {
	for i, data := range sampleBatches(f, 64, nil) {
		if i%7 == 0 {
			f.Add(data)
		}
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		checkAgainstProto(t, data)
	})
}

// The hand encoder writes a batch of built events byte for byte as
// proto.Marshal writes the same EventBatch.
func TestEventEncodingMatchesProto(t *testing.T) {
	batches := sampleBatches(t, 40, nil)
	var frags []*pb.Fragment
	var raws [][]byte
	for _, data := range batches {
		var b pb.FragmentBatch
		if err := proto.Unmarshal(data, &b); err != nil {
			t.Fatal(err)
		}
		for _, f := range b.Fragments {
			raw, err := proto.Marshal(f)
			if err != nil {
				t.Fatal(err)
			}
			frags, raws = append(frags, f), append(raws, raw)
		}
	}
	events := []struct {
		ev   builder.Event
		lumi uint32
		n    int
	}{
		{builder.Event{Run: 1, Orbit: 0, Bcid: 1, TimestampNs: 25, Flags: 0, EarliestSentNs: 1_800_000_000_000_000_000}, 1, 16},
		{builder.Event{Run: 7, Orbit: 1 << 40, Bcid: 3563, TimestampNs: -5, Missing: []uint32{2, 300, 1 << 31}, Flags: 5, EarliestSentNs: 0}, 0, 3},
		{builder.Event{}, 0, 0},
	}
	var want pb.EventBatch
	want.Builder, want.Sequence = 3, 1<<33
	out := make([]byte, batchHeadRoom)
	k := 0
	for i, e := range events {
		be := &pb.BuiltEvent{Run: e.ev.Run, Orbit: e.ev.Orbit, Bcid: e.ev.Bcid, TimestampNs: e.ev.TimestampNs, LumiSlice: e.lumi,
			MissingSources: e.ev.Missing, Flags: e.ev.Flags, ReadoutUnixNs: e.ev.EarliestSentNs, BuiltUnixNs: int64(i) * 1e9}
		enc := builtEvent{ev: &events[i].ev, lumi: e.lumi, builtNs: be.BuiltUnixNs}
		for j := 0; j < e.n; j++ {
			be.Fragments = append(be.Fragments, frags[k])
			enc.raws = append(enc.raws, raws[k])
			k++
		}
		want.Events = append(want.Events, be)
		out = enc.appendTo(out)
	}
	head := batchHead(nil, 3, 1<<33)
	got := append(head, out[batchHeadRoom:]...)
	exp, err := proto.Marshal(&want)
	if err != nil {
		t.Fatal(err)
	}
	if string(got) != string(exp) {
		t.Fatalf("hand encoding differs from proto.Marshal:\n got %x\nwant %x", got, exp)
	}
	want.Events, want.EndOfRun, want.EventsTotal = nil, true, 12345
	exp, _ = proto.Marshal(&want)
	got = appendBatchTail(batchHead(nil, 3, 1<<33), true, 12345)
	if string(got) != string(exp) {
		t.Fatalf("end-of-run batch differs from proto.Marshal:\n got %x\nwant %x", got, exp)
	}
}

// BenchmarkDecodeBatch compares the fast decoder with proto.Unmarshal on
// the readout's batches (32 crossings of one source each).
func BenchmarkDecodeBatch(b *testing.B) {
	batches := sampleBatches(b, 3200, nil)
	var bytes, frags int
	for _, d := range batches {
		bytes += len(d)
	}
	b.Run("wire", func(b *testing.B) {
		p := newFragmentPool()
		var wb wireBatch
		b.ReportAllocs()
		b.SetBytes(int64(bytes / len(batches)))
		frags = 0
		c0 := cpuTime()
		for i := 0; b.Loop(); i++ {
			if err := decodeBatch(batches[i%len(batches)], &wb, p); err != nil {
				b.Fatal(err)
			}
			frags += len(wb.frags)
			for _, h := range wb.frags {
				p.put(h)
			}
		}
		b.ReportMetric(float64(frags)/b.Elapsed().Seconds(), "fragments/s")
		b.ReportMetric(float64((cpuTime()-c0).Nanoseconds())/float64(frags), "cpu-ns/fragment")
	})
	b.Run("proto", func(b *testing.B) {
		b.ReportAllocs()
		b.SetBytes(int64(bytes / len(batches)))
		frags = 0
		c0 := cpuTime()
		for i := 0; b.Loop(); i++ {
			var fb pb.FragmentBatch
			if err := proto.Unmarshal(batches[i%len(batches)], &fb); err != nil {
				b.Fatal(err)
			}
			frags += len(fb.Fragments)
		}
		b.ReportMetric(float64(frags)/b.Elapsed().Seconds(), "fragments/s")
		b.ReportMetric(float64((cpuTime()-c0).Nanoseconds())/float64(frags), "cpu-ns/fragment")
	})
}

// BenchmarkBuildService runs the builder service's message handler on
// the readout's batches: decoding, checksums, event building and encoding
// of the built events, published to an in-process NATS server with no
// subscriber.
func BenchmarkBuildService(b *testing.B) {
	batches := sampleBatches(b, 20000, nil)
	ends := 16
	srv, err := transport.Embedded("127.0.0.1", -1)
	if err != nil {
		b.Fatal(err)
	}
	defer func() { srv.Shutdown(); srv.WaitForShutdown() }()
	nc, err := transport.ConnectInProcess(srv, "bench")
	if err != nil {
		b.Fatal(err)
	}
	defer nc.Close()
	d := detector.DefaultDescription()
	part, _ := detector.NewPartition(d.Geometry, 16)
	var crossings int
	var cpu time.Duration
	b.ReportAllocs()
	for b.Loop() {
		a, err := New(Config{Builder: builder.Config{Run: 1, Sources: part.SourceIDs()}}, nc, prometheus.NewRegistry())
		if err != nil {
			b.Fatal(err)
		}
		c0 := cpuTime()
		for _, data := range batches[:len(batches)-ends] {
			a.onMsg(&nats.Msg{Subject: "bench", Data: data})
		}
		a.mu.Lock()
		a.b.Flush()
		if err := a.publishLocked(false); err != nil {
			b.Fatal(err)
		}
		crossings += int(a.emitted)
		a.mu.Unlock()
		cpu += cpuTime() - c0
	}
	b.ReportMetric(float64(crossings)/b.Elapsed().Seconds(), "events/s")
	b.ReportMetric(cpu.Seconds()*1e6/float64(crossings), "cpu-us/event")
	b.ReportMetric(float64(crossings*16)/b.Elapsed().Seconds(), "fragments/s")
}

// toyGenerator returns the toy generator with seed over 16 calorimeter
// sources of the built-in description, and their partition.
func toyGenerator(tb testing.TB, seed uint64) (*detector.SimpleGenerator, *detector.Partition) {
	tb.Helper()
	d := detector.DefaultDescription()
	part, err := detector.NewPartition(d.Geometry, 16)
	if err != nil {
		tb.Fatal(err)
	}
	gen, err := detector.NewSimpleGenerator(d, part, seed, detector.SimpleConfig{})
	if err != nil {
		tb.Fatal(err)
	}
	return gen, part
}

// batchHeader agrees with proto.Unmarshal on the source and sequence of
// every batch of a run (zero sequence numbers, which are not encoded,
// included), and refuses bytes that are not a batch.
func TestBatchHeaderMatchesProto(t *testing.T) {
	stream, _ := oneCrossingBatches(t, 30)
	for i, data := range stream.batches {
		var want pb.FragmentBatch
		if err := proto.Unmarshal(data, &want); err != nil {
			t.Fatal(err)
		}
		src, seq, ok := batchHeader(data)
		if !ok || src != want.SourceId || seq != want.Sequence {
			t.Fatalf("batch %d: (%d, %d, %v), proto says source %d sequence %d", i, src, seq, ok, want.SourceId, want.Sequence)
		}
	}
	if _, _, ok := batchHeader([]byte{0x08}); ok {
		t.Error("a tag without its value read as a batch")
	}
}
