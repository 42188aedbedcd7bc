package replay

import (
	"math/rand/v2"
	"testing"

	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"

	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

func randomBatch(r *rand.Rand) *pb.FragmentBatch {
	b := &pb.FragmentBatch{SourceId: r.Uint32N(40), Run: r.Uint32N(5), Sequence: r.Uint64(), SentUnixNs: r.Int64(), EndOfRun: r.IntN(4) == 0}
	for range r.IntN(6) {
		f := &pb.Fragment{SourceId: r.Uint32(), Run: r.Uint32N(3), Orbit: r.Uint64N(1 << 40), Bcid: r.Uint32N(4000),
			TimestampNs: r.Int64() - r.Int64(), Status: r.Uint32N(8), Checksum: r.Uint32()}
		switch r.IntN(3) {
		case 0:
			c := &pb.CaloPayload{}
			for range r.IntN(80) {
				c.Towers = append(c.Towers, r.Uint32N(1<<uint(1+r.IntN(31))))
				c.EtCounts = append(c.EtCounts, r.Uint32N(1<<uint(1+r.IntN(31))))
			}
			if r.IntN(5) == 0 {
				c.EtCounts = c.EtCounts[:len(c.EtCounts)/2]
			}
			f.Payload = &pb.Fragment_Calo{Calo: c}
		case 1:
			m := &pb.MuonPayload{}
			for range r.IntN(6) {
				m.Hits = append(m.Hits, &pb.MuonHit{Station: r.Uint32N(4), XMm: r.Float32() * 1e4, YMm: -r.Float32(), ZMm: r.Float32()})
			}
			f.Payload = &pb.Fragment_Muon{Muon: m}
		}
		b.Fragments = append(b.Fragments, f)
	}
	return b
}

// equalFragments compares decoded fragments with proto.Unmarshal's, the
// reference decoder of protobuf-go, field by field through proto.Equal.
func equalFragments(t *testing.T, got []*pb.Fragment, want *pb.FragmentBatch) {
	t.Helper()
	if len(got) != len(want.Fragments) {
		t.Fatalf("%d fragments, protobuf decodes %d", len(got), len(want.Fragments))
	}
	for i, f := range got {
		w := want.Fragments[i]
		clearUnknown(w)
		if !proto.Equal(f, w) {
			t.Fatalf("fragment %d:\n got %v\nwant %v", i, f, w)
		}
	}
}

func clearUnknown(f *pb.Fragment) {
	f.ProtoReflect().SetUnknown(nil)
	if c := f.GetCalo(); c != nil {
		c.ProtoReflect().SetUnknown(nil)
	}
	if m := f.GetMuon(); m != nil {
		m.ProtoReflect().SetUnknown(nil)
		for _, h := range m.Hits {
			h.ProtoReflect().SetUnknown(nil)
		}
	}
}

// decodeBatch reads what protobuf-go's proto.Unmarshal reads, including
// fields repeated (last one wins), appended unknown fields and the second
// sent_unix_ns a replay appends.
func TestDecodeBatchMatchesProtobuf(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2))
	pool := newFragmentPool().cache()
	var out []*pb.Fragment
	for i := range 2000 {
		b := randomBatch(r)
		data, err := proto.Marshal(b)
		if err != nil {
			t.Fatal(err)
		}
		switch i % 4 {
		case 1: // a replay's restamp
			data = protowire.AppendVarint(protowire.AppendTag(data, 4, protowire.VarintType), 12345)
		case 2: // an unknown field
			data = protowire.AppendBytes(protowire.AppendTag(data, 99, protowire.BytesType), []byte("later"))
		case 3: // a repeated scalar: the last one wins
			data = protowire.AppendVarint(protowire.AppendTag(data, 1, protowire.VarintType), 77)
		}
		var want pb.FragmentBatch
		if err := proto.Unmarshal(data, &want); err != nil {
			t.Fatal(err)
		}
		for _, f := range out {
			pool.put(f)
		}
		var info batchInfo
		out, info, err = decodeBatch(data, pool, out[:0])
		if err != nil {
			t.Fatalf("batch %d: %v", i, err)
		}
		if info.source != want.SourceId || info.run != want.Run || info.endOfRun != want.EndOfRun {
			t.Fatalf("batch %d: info %+v, want source %d run %d end %v", i, info, want.SourceId, want.Run, want.EndOfRun)
		}
		equalFragments(t, out, &want)
	}
}

// FuzzDecodeBatch: no input makes the decoder panic, and whatever
// protobuf decodes, it decodes the same.
func FuzzDecodeBatch(f *testing.F) {
	r := rand.New(rand.NewPCG(3, 4))
	for range 20 {
		data, _ := proto.Marshal(randomBatch(r))
		f.Add(data)
	}
	f.Add([]byte{0x2a, 0x05, 0x3a, 0x03, 0x0a, 0x01})
	pool := newFragmentPool().cache()
	f.Fuzz(func(t *testing.T, data []byte) {
		out, _, err := decodeBatch(data, pool, nil)
		defer func() {
			for _, fr := range out {
				pool.put(fr)
			}
		}()
		var want pb.FragmentBatch
		if proto.Unmarshal(data, &want) != nil {
			return
		}
		if err != nil {
			t.Fatalf("protobuf decodes it, decodeBatch says %v", err)
		}
		equalFragments(t, out, &want)
	})
}

// decodeBatch is decodeBatchFunc through decodeFragment: the reference
// path the one-pass decoding is checked against.
func decodeBatch(data []byte, pool *slotCache, out []*pb.Fragment) ([]*pb.Fragment, batchInfo, error) {
	return decodeBatchFunc(data, pool, out, decodeFragment)
}
