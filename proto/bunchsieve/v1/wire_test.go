package bunchsievev1

import (
	"testing"

	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"
)

// ConsumeTag refuses a field number exactly when proto.Unmarshal does
// (the reference decoder of google.golang.org/protobuf): every number up
// to 2^29 - 1 is a field, anything above is malformed.
func TestConsumeTagMatchesProto(t *testing.T) {
	for _, num := range []uint64{1, 15, 16, uint64(protowire.MaxValidNumber) - 1, uint64(protowire.MaxValidNumber), uint64(protowire.MaxValidNumber) + 1, 1 << 30, 1<<31 - 1, 1 << 31} {
		b := protowire.AppendVarint(nil, num<<3|uint64(protowire.VarintType))
		b = protowire.AppendVarint(b, 7)
		_, _, n := ConsumeTag(b)
		protoErr := proto.Unmarshal(b, &FragmentBatch{})
		if (n < 0) != (protoErr != nil) {
			t.Errorf("field %d: ConsumeTag n = %d, proto.Unmarshal error %v", num, n, protoErr)
		}
	}
}

// SetFragmentVarint sets each varint field as proto.Unmarshal decodes it,
// wide values included, and refuses the other field numbers.
func TestSetFragmentVarintMatchesProto(t *testing.T) {
	for num := protowire.Number(1); num <= 12; num++ {
		for _, v := range []uint64{0, 1, 300, 1<<32 + 5, 1<<63 + 7} {
			var got Fragment
			ok := SetFragmentVarint(&got, num, v)
			b := protowire.AppendVarint(protowire.AppendTag(nil, num, protowire.VarintType), v)
			var want Fragment
			err := proto.Unmarshal(b, &want)
			isVarint := num <= 6 || num == 9
			if ok != isVarint {
				t.Fatalf("field %d: ok %v", num, ok)
			}
			if ok && (err != nil || !proto.Equal(&got, &want)) {
				t.Fatalf("field %d = %d: got %v, proto %v (%v)", num, v, &got, &want, err)
			}
		}
	}
}
