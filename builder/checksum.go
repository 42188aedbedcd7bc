package builder

import pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"

// checksum returns the CRC-32C of f's canonical content, the value
// Fragment.Seal stores, through the builder's own allocation-free
// Checksummer.
func (b *Builder) checksum(f *pb.Fragment) uint32 { return b.crc.Sum(f) }
