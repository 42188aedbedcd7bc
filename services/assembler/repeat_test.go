package assembler

import "testing"

// A readout that ended or crashed while no builder ran, and was started
// again, numbers its batches from 0 once more. Its batches at or below
// the highest number taken before are new, not repeats: they were sent
// after every batch of that source taken so far. A batch that came both
// from the stream and live carries the same send time as the copy taken,
// and is passed over.
func TestRepeatTellsARestartedReadoutFromARepeat(t *testing.T) {
	const src = 7
	for _, mode := range []struct {
		name   string
		dedupe bool
	}{{"live, after the catch-up", false}, {"reading the stream", true}} {
		t.Run(mode.name, func(t *testing.T) {
			a := &Assembler{
				dedupe:    mode.dedupe,
				lastBatch: map[uint32]uint64{src: 5},
				lastSent:  map[uint32]int64{src: 5_000},
			}
			if !mode.dedupe {
				a.liveUpTo = map[uint32]uint64{src: 5}
			}
			// Batches 3 to 5 of the first readout, again: repeats.
			for seq := uint64(3); seq <= 5; seq++ {
				if !a.repeatedLocked(dataBatch(src, seq, int64(seq)*1_000)) {
					t.Errorf("batch %d sent again with its first send time was taken twice", seq)
				}
			}
			// The readout started again: batches 0 to 7, sent later.
			for seq := uint64(0); seq <= 7; seq++ {
				if a.repeatedLocked(dataBatch(src, seq, 10_000+int64(seq)*1_000)) {
					t.Fatalf("batch %d of the readout started again was passed over as a repeat", seq)
				}
				if a.lastBatch[src] != seq {
					t.Fatalf("after batch %d of the readout started again: numbering at %d", seq, a.lastBatch[src])
				}
			}
			// Reading the stream, a repeat of the new readout's batch 2
			// is passed over. (Live, once past the stream, every batch
			// comes once: NATS core does not deliver twice.)
			if rep := a.repeatedLocked(dataBatch(src, 2, 12_000)); mode.dedupe && !rep {
				t.Error("a repeat of the new readout's batch 2 was taken twice")
			}
		})
	}
}

// dataBatch is a batch of one fragment of src, numbered seq, sent at sent.
func dataBatch(src uint32, seq uint64, sent int64) *wireBatch {
	return &wireBatch{sourceID: src, sequence: seq, sentUnixNs: sent, frags: make([]*heldFragment, 1)}
}

// Without send times (batches not stamped, or a state file written
// before they were kept) the sequence numbers alone decide, as before.
func TestRepeatWithoutSendTimes(t *testing.T) {
	a := &Assembler{lastBatch: map[uint32]uint64{1: 5}, lastSent: map[uint32]int64{}, liveUpTo: map[uint32]uint64{1: 5}}
	if !a.repeatedLocked(dataBatch(1, 4, 0)) {
		t.Error("batch 4 below the stream's highest, before any live batch passed it, was taken")
	}
	if a.repeatedLocked(dataBatch(1, 6, 0)) {
		t.Error("batch 6 past the stream's highest was passed over")
	}
	if a.repeatedLocked(dataBatch(1, 0, 0)) {
		t.Error("batch 0 after the live batches passed the stream's was passed over")
	}
}

// The end-of-run marker a replay sends for a damaged stream has sequence
// number 0 and a fresh send time. It must not read as a readout started
// again: the numbering would restart at 0, and after a resume the
// batches read again from the stream would be taken twice.
func TestEndMarkerLeavesTheNumberingAlone(t *testing.T) {
	const src = 3
	a := &Assembler{lastBatch: map[uint32]uint64{}, lastSent: map[uint32]int64{}}
	for seq := uint64(0); seq <= 100; seq++ {
		if a.repeatedLocked(dataBatch(src, seq, 1_000+int64(seq))) {
			t.Fatalf("batch %d, first time, passed over", seq)
		}
	}
	if a.repeatedLocked(&wireBatch{sourceID: src, endOfRun: true, sentUnixNs: 2_000}) {
		t.Fatal("the end-of-run marker was passed over")
	}
	if a.lastBatch[src] != 100 || a.lastSent[src] != 1_100 {
		t.Fatalf("after the marker: last batch %d sent %d, want 100 and 1100", a.lastBatch[src], a.lastSent[src])
	}
	// A resumed builder reads the stream again from a little before.
	a.dedupe = true
	for seq := uint64(95); seq <= 100; seq++ {
		if !a.repeatedLocked(dataBatch(src, seq, 1_000+int64(seq))) {
			t.Errorf("batch %d read again from the stream was taken twice", seq)
		}
	}
}
