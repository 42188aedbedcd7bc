package bunchsievev1

import (
	"encoding/binary"
	"hash/crc32"
	"slices"

	"google.golang.org/protobuf/encoding/protowire"
)

// Checksumming a calorimeter payload straight from its packed lists.
// Decoding the packed tower and count lists into arrays and then
// checksumming the arrays reads every number twice; SumPacked reads the
// two lists once, in step, feeding the CRC, and can keep the towers as
// the 4-byte words trigger.CountTowers reads. The builder service and the
// replay take this path for fragments in the readout's canonical layout
// (SplitCalo); anything else goes through Sum on a decoded Fragment.

// SumPacked returns what Sum gives for a fragment with f's header fields
// and a calorimeter payload whose tower indices and ET counts are the
// packed lists towers and counts (the contents of CaloPayload's fields 1
// and 2, as SplitCalo gives them); f's own payload is not looked at. In
// the same pass it appends to words, for every pair with a nonzero count
// and an index below ncells, the word index | count<<16, and returns the
// result (ncells 0 keeps none; words may then be a scratch slice). ok is
// false, with sum and out unspecified and words[:len(words)] untouched,
// when a list is not a valid
// packed varint list or a kept count does not fit 16 bits; the caller
// then decodes the payload and uses Sum.
func (c *Checksummer) SumPacked(f *Fragment, towers, counts []byte, ncells int, words []uint32) (sum uint32, out []uint32, ok bool) {
	return c.sumPacked(f, towers, counts, ncells, words, true)
}

// PackedWords appends the words SumPacked would for the packed lists
// towers and counts, without computing the checksum, for a reader that
// trusts a check made upstream (the selection, after the builder). ok is
// false exactly when SumPacked's would be.
func (c *Checksummer) PackedWords(towers, counts []byte, ncells int, words []uint32) (out []uint32, ok bool) {
	_, out, ok = c.sumPacked(nil, towers, counts, ncells, words, false)
	return out, ok
}

// sumPacked is SumPacked, with the CRC left out unless crc. Without it the
// layout is still written to the scratch buffer (stores into a cache line
// already held cost less than a branch per pair would) and dropped when
// the buffer is full.
func (c *Checksummer) sumPacked(f *Fragment, towers, counts []byte, ncells int, words []uint32, crc bool) (sum uint32, out []uint32, ok bool) {
	le := binary.LittleEndian
	buf, n := c.header(f)

	// Every value takes at least a byte, so the shorter list's length
	// bounds the number of pairs.
	out = slices.Grow(words, min(len(towers), len(counts)))
	j := len(out)
	out = out[:cap(out)]
	ti, ci := 0, 0
	for ti < len(towers) && ci < len(counts) {
		if n+32 > len(buf) {
			if crc {
				sum = crc32.Update(sum, castagnoli, buf[:n])
			}
			n = 0
		}
		// Four pairs at once where the next four towers are two-byte
		// varints and the next four counts one-byte ones, as nearly all
		// of a crossing's are (indices of 128 and up, counts below 32
		// GeV): the continuation bits of eight tower bytes and four
		// count bytes are tested in two words, with no branch per value.
		if ti+8 <= len(towers) && ci+4 <= len(counts) {
			tb, cb := le.Uint64(towers[ti:]), le.Uint32(counts[ci:])
			if tb&0x8080808080808080 == 0x0080008000800080 && cb&0x80808080 == 0 {
				t0 := uint32(tb)&0x7f | uint32(tb>>8)&0x7f<<7
				t1 := uint32(tb>>16)&0x7f | uint32(tb>>24)&0x7f<<7
				t2 := uint32(tb>>32)&0x7f | uint32(tb>>40)&0x7f<<7
				t3 := uint32(tb>>48)&0x7f | uint32(tb>>56)&0x7f<<7
				c0, c1, c2, c3 := cb&0xff, cb>>8&0xff, cb>>16&0xff, cb>>24
				b := buf[n : n+32]
				le.PutUint64(b[0:], uint64(t0)|uint64(c0)<<32)
				le.PutUint64(b[8:], uint64(t1)|uint64(c1)<<32)
				le.PutUint64(b[16:], uint64(t2)|uint64(c2)<<32)
				le.PutUint64(b[24:], uint64(t3)|uint64(c3)<<32)
				n += 32
				o := out[j : j+4]
				// Zero counts and indices off the table give no tower.
				// Nearly always all four are kept (the readout
				// suppresses zeros): then the four stores do not wait
				// for each other's index. The counts are below 0x80 here,
				// so a byte is zero exactly when subtracting one from it
				// sets its top bit.
				if (cb-0x01010101)&0x80808080 == 0 && max(t0, t1, t2, t3) < uint32(ncells) {
					o[0], o[1], o[2], o[3] = uint32(t0|c0<<16), uint32(t1|c1<<16), uint32(t2|c2<<16), uint32(t3|c3<<16)
					j += 4
					ti, ci = ti+8, ci+4
					continue
				}
				o[0] = uint32(t0 | c0<<16)
				j += keep(t0, c0, ncells)
				o = out[j : j+3]
				o[0] = uint32(t1 | c1<<16)
				j += keep(t1, c1, ncells)
				o = out[j : j+2]
				o[0] = uint32(t2 | c2<<16)
				j += keep(t2, c2, ncells)
				o = out[j : j+1]
				o[0] = uint32(t3 | c3<<16)
				j += keep(t3, c3, ncells)
				ti, ci = ti+8, ci+4
				continue
			}
		}
		// packedNext by hand: it is too large for the compiler to inline.
		var tw, ct uint32
		if c := towers[ti]; c < 0x80 {
			tw, ti = uint32(c), ti+1
		} else if ti+1 < len(towers) && towers[ti+1] < 0x80 {
			tw, ti = uint32(c&0x7f)|uint32(towers[ti+1])<<7, ti+2
		} else if tw, ti = packedSlow(towers, ti); ti < 0 {
			return 0, nil, false
		}
		if c := counts[ci]; c < 0x80 {
			ct, ci = uint32(c), ci+1
		} else if ci+1 < len(counts) && counts[ci+1] < 0x80 {
			ct, ci = uint32(c&0x7f)|uint32(counts[ci+1])<<7, ci+2
		} else if ct, ci = packedSlow(counts, ci); ci < 0 {
			return 0, nil, false
		}
		// The pair as two little-endian uint32s, in one store.
		le.PutUint64(buf[n:], uint64(tw)|uint64(ct)<<32)
		n += 8
		// Zero counts and indices off the table give no word.
		if ct != 0 && int(tw) < ncells {
			if ct > 0xffff {
				// Beyond any readout's range; a word cannot hold it.
				return 0, nil, false
			}
			out[j] = uint32(tw | ct<<16)
			j++
		}
	}
	// Surplus towers go in with a zero count, surplus counts alone, as
	// Checksummer.Sum has them.
	for ti < len(towers) {
		var tw uint32
		if tw, ti = packedNext(towers, ti); ti < 0 {
			return 0, nil, false
		}
		if n+8 > len(buf) {
			if crc {
				sum = crc32.Update(sum, castagnoli, buf[:n])
			}
			n = 0
		}
		le.PutUint32(buf[n:], tw)
		le.PutUint32(buf[n+4:], 0)
		n += 8
	}
	for ci < len(counts) {
		var ct uint32
		if ct, ci = packedNext(counts, ci); ci < 0 {
			return 0, nil, false
		}
		if n+4 > len(buf) {
			if crc {
				sum = crc32.Update(sum, castagnoli, buf[:n])
			}
			n = 0
		}
		le.PutUint32(buf[n:], ct)
		n += 4
	}
	if crc {
		sum = crc32.Update(sum, castagnoli, buf[:n])
	}
	return sum, out[:j], true
}

// keep is 1 when a pair of index tw and count ct gives a word: a nonzero
// count at an index below ncells.
func keep(tw, ct uint32, ncells int) int {
	if ct != 0 && int(tw) < ncells {
		return 1
	}
	return 0
}

// SplitCalo splits a CaloPayload encoding in the canonical layout (the
// towers packed, then the counts packed, each at most once and nothing
// else) into its two packed lists; ok is false for any other layout.
func SplitCalo(p []byte) (towers, counts []byte, ok bool) {
	const towersTag, countsTag = 1<<3 | byte(protowire.BytesType), 2<<3 | byte(protowire.BytesType)
	if len(p) > 0 && p[0] == towersTag {
		v, n := protowire.ConsumeBytes(p[1:])
		if n < 0 {
			return nil, nil, false
		}
		towers, p = v, p[1+n:]
	}
	if len(p) > 0 && p[0] == countsTag {
		v, n := protowire.ConsumeBytes(p[1:])
		if n < 0 {
			return nil, nil, false
		}
		counts, p = v, p[1+n:]
	}
	return towers, counts, len(p) == 0
}

// packedNext decodes the varint at b[i:], i < len(b), truncated to 32
// bits as protobuf decodes uint32, and returns it with the index after
// it, or with -1 for a bad varint. One- and two-byte varints, nearly all
// of a tower list, are decoded inline.
func packedNext(b []byte, i int) (uint32, int) {
	c := b[i]
	if c < 0x80 {
		return uint32(c), i + 1
	}
	if i+1 < len(b) && b[i+1] < 0x80 {
		return uint32(c&0x7f) | uint32(b[i+1])<<7, i + 2
	}
	return packedSlow(b, i)
}

func packedSlow(b []byte, i int) (uint32, int) {
	v, k := protowire.ConsumeVarint(b[i:])
	if k < 0 {
		return 0, -1
	}
	return uint32(v), i + k
}
