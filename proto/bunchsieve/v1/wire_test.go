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
