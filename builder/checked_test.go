package builder

import (
	"errors"
	"math/rand/v2"
	"reflect"
	"testing"
)

// AddChecked takes the caller's verdict: a damaged fragment is rejected
// as a checksum mismatch even when the Builder skips checksums, and an
// intact verdict is not second-guessed.
func TestAddCheckedVerdict(t *testing.T) {
	for _, skip := range []bool{false, true} {
		b, c := newBuilder(t, Config{Sources: []uint32{1, 2}, SkipChecksum: skip})
		good := frag(1, 0, 3, 4)
		err := b.AddChecked(good, false, 0, 0)
		var fe *FragmentError
		if !errors.Is(err, ErrMalformed) || !errors.As(err, &fe) || fe.Reason != ReasonMalformedChecksum {
			t.Fatalf("skip %v: damaged verdict: %v", skip, err)
		}
		if st := b.Stats(); st.MalformedChecksum != 1 || st.Malformed != 1 || st.Received != 1 {
			t.Fatalf("skip %v: damaged verdict counted as %+v", skip, st)
		}
		// The checksum no longer matches, but the caller says it does.
		f := frag(1, 0, 3, 4)
		f.Checksum++
		if err := b.AddChecked(f, true, 0, 0); err != nil {
			t.Fatalf("skip %v: intact verdict: %v", skip, err)
		}
		if err := b.AddChecked(frag(2, 0, 3, 4), true, 0, 0); err != nil {
			t.Fatal(err)
		}
		if ev := c.take(); len(ev) != 1 || len(ev[0].Missing) != 0 {
			t.Fatalf("skip %v: events %v", skip, ev)
		}
		checkBalanced(t, b, DefaultWindow)
	}
}

// Checking each fragment elsewhere and handing the verdict to AddChecked
// builds what Add builds with its own verification: the same events and
// the same accounting, on a shuffled stream with damaged, duplicated and
// foreign fragments.
func TestAddCheckedMatchesAdd(t *testing.T) {
	r := rand.New(rand.NewPCG(4, 2))
	sources := seq(1, 6)
	var stream []struct {
		src   uint32
		orbit uint64
		bcid  uint32
		bad   bool
		run   uint32
	}
	for orbit := range uint64(3) {
		for bcid := uint32(0); bcid < 600; bcid += 7 {
			for _, s := range sources {
				if r.IntN(20) == 0 {
					continue
				}
				e := struct {
					src   uint32
					orbit uint64
					bcid  uint32
					bad   bool
					run   uint32
				}{src: s, orbit: orbit, bcid: bcid, bad: r.IntN(10) == 0}
				if r.IntN(40) == 0 {
					e.run = 9
				}
				stream = append(stream, e)
				if r.IntN(30) == 0 {
					stream = append(stream, e)
				}
			}
		}
	}
	// Neighbours swap, so crossings interleave as they do on a wire.
	for i := 1; i < len(stream); i++ {
		if r.IntN(3) == 0 {
			stream[i-1], stream[i] = stream[i], stream[i-1]
		}
	}
	ref, rc := newBuilder(t, Config{Sources: sources, Window: 64})
	chk, cc := newBuilder(t, Config{Sources: sources, Window: 64, SkipChecksum: true})
	damaged := 0
	for i, e := range stream {
		f1, f2 := frag(e.src, e.run, e.orbit, e.bcid), frag(e.src, e.run, e.orbit, e.bcid)
		if e.bad {
			f1.Checksum ^= 1 << (i % 32)
			f2.Checksum = f1.Checksum
		}
		now := int64(i) * 1000
		err1 := ref.Add(f1, now, now)
		intact := f2.Intact()
		if !intact {
			damaged++
		}
		err2 := chk.AddChecked(f2, intact, now, now)
		if !reflect.DeepEqual(err1, err2) {
			t.Fatalf("fragment %d: Add says %v, AddChecked %v", i, err1, err2)
		}
	}
	ref.Flush()
	chk.Flush()
	if damaged == 0 {
		t.Fatal("no damaged fragment in the stream")
	}
	if a, b := rc.take(), cc.take(); len(a) == 0 || !reflect.DeepEqual(a, b) {
		t.Fatalf("events differ: Add built %d, AddChecked %d", len(a), len(b))
	}
	if a, b := ref.Stats(), chk.Stats(); a != b || a.MalformedChecksum != uint64(damaged) {
		t.Fatalf("accounting differs:\n Add        %+v\n AddChecked %+v (damaged %d)", a, b, damaged)
	}
	checkBalanced(t, chk, 64)
}
