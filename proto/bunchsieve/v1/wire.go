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

// SetFragmentVarint sets the varint field num of f to v as proto.Unmarshal
// sets it (uint32 fields keep the low 32 bits, int64 the bits as they
// are), and reports whether num is one of Fragment's varint fields
// (fragment.proto: source_id 1, run 2, orbit 3, bcid 4, timestamp_ns 5,
// status 6, checksum 9). The hand-written decoders share it so that they
// cannot disagree about a field.
func SetFragmentVarint(f *Fragment, num protowire.Number, v uint64) bool {
	switch num {
	case 1:
		f.SourceId = uint32(v)
	case 2:
		f.Run = uint32(v)
	case 3:
		f.Orbit = v
	case 4:
		f.Bcid = uint32(v)
	case 5:
		f.TimestampNs = int64(v)
	case 6:
		f.Status = uint32(v)
	case 9:
		f.Checksum = uint32(v)
	default:
		return false
	}
	return true
}
