package bunchsievev1

import "google.golang.org/protobuf/encoding/protowire"

// ConsumeTag is protowire.ConsumeTag with the field-number range that
// proto.Unmarshal enforces: protowire accepts any number up to
// math.MaxInt32, while the protobuf encoding allows at most
// protowire.MaxValidNumber (2^29 - 1) and proto.Unmarshal refuses bytes
// with a larger one. The hand-written decoders of the hot paths use this,
// so that they refuse exactly what proto refuses.
func ConsumeTag(b []byte) (protowire.Number, protowire.Type, int) {
	num, typ, n := protowire.ConsumeTag(b)
	if n >= 0 && num > protowire.MaxValidNumber {
		return 0, 0, -1
	}
	return num, typ, n
}
