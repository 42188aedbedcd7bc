package recording

import (
	"encoding/binary"
	"errors"
	"fmt"
	"math"

	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

// FormatVersionTruth is the format version of files that may carry truth
// frames (CreateWithTruth). Readers of version 1 refuse such files with a
// clear version error instead of stumbling on an unknown frame; this
// package reads both versions.
const FormatVersionTruth = 2

// kindTruth is the frame kind of generator truth records (version 2).
const kindTruth = 3

// truthFixedSize is the fixed part of a truth record after its length:
// n, orbit (u64), bcid, interactions (u32), process (u8), weight, true MET
// x and y, invisible x and y (f64), then the counts of hard processes and
// objects (u16 each).
const truthFixedSize = 8 + 8 + 4 + 4 + 1 + 5*8 + 2 + 2

// truthObjectSize is one object: kind (u8), pdg (i32), charge, pt, eta,
// phi, mass (f64), hard (u16).
const truthObjectSize = 1 + 4 + 5*8 + 2

// ErrNoTruth is returned by Writer.WriteTruth on a file made by Create,
// whose format version has no truth frames.
var ErrNoTruth = errors.New("recording: truth records need a file made by CreateWithTruth")

// TruthRecord is the generator truth of one recorded crossing: its
// numbers, the overlaid interactions, the true missing transverse momentum
// and the generator's record of the hard processes.
type TruthRecord struct {
	N, Orbit           uint64
	Bcid               uint32
	Interactions       int
	TrueMETx, TrueMETy float64
	Truth              detector.Truth
}

// CreateWithTruth is Create for a file that also carries the generator
// truth of every crossing (WriteTruth), written as format version 2.
func CreateWithTruth(path string, h *pb.StreamHeader) (*Writer, error) {
	w, err := create(path, h, FormatVersionTruth)
	if err != nil {
		return nil, err
	}
	w.withTruth = true
	return w, nil
}

// WriteTruth appends the truth of crossing c. Truth frames are written
// just before each frame of batches, so a reader meets the truth of a
// crossing before any of its fragments. It returns ErrNoTruth on a file
// made by Create.
func (w *Writer) WriteTruth(c *detector.Crossing) error {
	if !w.withTruth {
		return ErrNoTruth
	}
	if w.err != nil {
		return w.err
	}
	t := &c.Truth
	if len(t.Hard) > math.MaxUint16 || len(t.Objects) > math.MaxUint16 {
		return fmt.Errorf("recording: crossing %d has %d hard processes and %d truth objects, at most %d each", c.N, len(t.Hard), len(t.Objects), math.MaxUint16)
	}
	size := truthFixedSize + len(t.Hard) + len(t.Objects)*truthObjectSize
	le := binary.LittleEndian
	b := le.AppendUint32(w.truth, uint32(size))
	b = le.AppendUint64(b, c.N)
	b = le.AppendUint64(b, c.Orbit)
	b = le.AppendUint32(b, c.Bcid)
	b = le.AppendUint32(b, uint32(max(c.Interactions, 0)))
	b = append(b, byte(t.Process))
	for _, v := range [...]float64{t.Weight, c.TrueMETx, c.TrueMETy, t.InvisibleX, t.InvisibleY} {
		b = le.AppendUint64(b, math.Float64bits(v))
	}
	b = le.AppendUint16(b, uint16(len(t.Hard)))
	b = le.AppendUint16(b, uint16(len(t.Objects)))
	for _, p := range t.Hard {
		b = append(b, byte(p))
	}
	for _, o := range t.Objects {
		b = append(b, byte(o.Kind))
		b = le.AppendUint32(b, uint32(o.PDG))
		for _, v := range [...]float64{o.Charge, o.PT, o.Eta, o.Phi, o.Mass} {
			b = le.AppendUint64(b, math.Float64bits(v))
		}
		b = le.AppendUint16(b, uint16(min(max(o.Hard, 0), math.MaxUint16)))
	}
	w.truth = b
	w.trailerTruth++
	if len(w.truth) >= w.target {
		return w.flushTruth()
	}
	return nil
}

// flushTruth writes the buffered truth records as one frame.
func (w *Writer) flushTruth() error {
	if len(w.truth) == 0 {
		return nil
	}
	if err := w.writeFrame(kindTruth, w.truth); err != nil {
		return err
	}
	w.truth = w.truth[:0]
	return nil
}

// TruthRecords returns the number of truth records written so far.
func (w *Writer) TruthRecords() uint64 { return w.trailerTruth }

// truthGenerator is the generator returned by RecordTruth.
type truthGenerator struct {
	gen detector.Generator
	w   *Writer
}

// RecordTruth returns a generator that makes the crossings of gen and
// writes the truth of each into w as it is made: the record-time hook for
// files made by CreateWithTruth. The first write error is kept by w and
// returned by its next WriteBatch or Close. Like gen, the result is not
// safe for concurrent use, and w must be written from the same goroutine.
func RecordTruth(gen detector.Generator, w *Writer) detector.Generator {
	return &truthGenerator{gen: gen, w: w}
}

func (g *truthGenerator) Generate(n uint64, c *detector.Crossing) {
	g.gen.Generate(n, c)
	if err := g.w.WriteTruth(c); err != nil && g.w.err == nil {
		g.w.err = err
	}
}

// OnTruth makes Next hand every truth record it reads to fn, in file
// order, before the batches that follow it. The record and its slices are
// reused after fn returns. Without OnTruth truth frames are checked and
// skipped.
func (r *Reader) OnTruth(fn func(*TruthRecord)) { r.onTruth = fn }

// HasTruth reports whether the file's format version allows truth frames
// (it was made by CreateWithTruth).
func (r *Reader) HasTruth() bool { return r.header.FormatVersion >= FormatVersionTruth }

// decodeTruth hands the records of a truth frame to the OnTruth function.
func (r *Reader) decodeTruth(raw []byte) error {
	le := binary.LittleEndian
	rec := &r.truthRec
	for len(raw) > 0 {
		if len(raw) < 4 {
			return r.fail(r.frameAt, "truth frame ends inside a record length", ErrCorrupt)
		}
		n := int(le.Uint32(raw))
		raw = raw[4:]
		if n > len(raw) || n < truthFixedSize {
			return r.fail(r.frameAt, fmt.Sprintf("truth record of %d bytes in %d left", n, len(raw)), ErrCorrupt)
		}
		b := raw[:n]
		raw = raw[n:]
		if r.onTruth == nil {
			continue
		}
		rec.N = le.Uint64(b[0:])
		rec.Orbit = le.Uint64(b[8:])
		rec.Bcid = le.Uint32(b[16:])
		rec.Interactions = int(le.Uint32(b[20:]))
		t := &rec.Truth
		t.Process = detector.Process(b[24])
		f := func(off int) float64 { return math.Float64frombits(le.Uint64(b[off:])) }
		t.Weight, rec.TrueMETx, rec.TrueMETy, t.InvisibleX, t.InvisibleY = f(25), f(33), f(41), f(49), f(57)
		nHard, nObj := int(le.Uint16(b[65:])), int(le.Uint16(b[67:]))
		// A longer record than this version writes is a later version's
		// extension: its tail is ignored.
		if truthFixedSize+nHard+nObj*truthObjectSize > n {
			return r.fail(r.frameAt, fmt.Sprintf("truth record of %d bytes cannot hold %d processes and %d objects", n, nHard, nObj), ErrCorrupt)
		}
		t.Hard = t.Hard[:0]
		off := truthFixedSize
		for i := 0; i < nHard; i++ {
			t.Hard = append(t.Hard, detector.Process(b[off+i]))
		}
		off += nHard
		t.Objects = t.Objects[:0]
		for i := 0; i < nObj; i++ {
			o := b[off:]
			t.Objects = append(t.Objects, detector.TruthObject{
				Kind: detector.ObjectKind(o[0]), PDG: int32(le.Uint32(o[1:])),
				Charge: math.Float64frombits(le.Uint64(o[5:])), PT: math.Float64frombits(le.Uint64(o[13:])),
				Eta: math.Float64frombits(le.Uint64(o[21:])), Phi: math.Float64frombits(le.Uint64(o[29:])),
				Mass: math.Float64frombits(le.Uint64(o[37:])), Hard: int(le.Uint16(o[45:])),
			})
			off += truthObjectSize
		}
		r.onTruth(rec)
	}
	return nil
}
