package recording

import (
	"errors"
	"fmt"
	"io"
	"path/filepath"
	"reflect"
	"strconv"
	"strings"
	"testing"

	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

// writeTruthSample records n crossings of a forced-process physics
// generator through the RecordTruth hook: after each crossing, one batch
// naming it, in frames small enough that truth and batches interleave.
func writeTruthSample(t *testing.T, n int) (string, []detector.Crossing) {
	t.Helper()
	d := detector.DefaultDescription()
	part, err := detector.NewPartition(d.Geometry, 4)
	if err != nil {
		t.Fatal(err)
	}
	gen, err := detector.NewPhysicsGenerator(d, part, 5, detector.PhysicsConfig{Mu: 2, Force: "w-munu", LibraryEvents: 20})
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "truth.bss")
	w, err := CreateWithTruth(path, &pb.StreamHeader{Run: 3, SourceIds: []uint32{1}})
	if err != nil {
		t.Fatal(err)
	}
	w.target = 2 << 10
	tap := RecordTruth(gen, w)
	var made []detector.Crossing
	var c detector.Crossing
	for i := range n {
		tap.Generate(uint64(i), &c)
		cp := c
		cp.Truth.Hard = append([]detector.Process(nil), c.Truth.Hard...)
		cp.Truth.Objects = append([]detector.TruthObject(nil), c.Truth.Objects...)
		made = append(made, cp)
		if err := w.WriteBatch(1, 0, c.TimestampNs, []byte(fmt.Sprintf("crossing-%d", i)), 1); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	if w.TruthRecords() != uint64(n) {
		t.Fatalf("%d truth records written, want %d", w.TruthRecords(), n)
	}
	return path, made
}

// Truth records come back exactly as generated, each before the batch of
// its crossing, and a reader that does not ask for them sees the same
// batches.
func TestTruthRoundTrip(t *testing.T) {
	const n = 300
	path, made := writeTruthSample(t, n)
	r, err := Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	if !r.HasTruth() || r.Header().FormatVersion != FormatVersionTruth {
		t.Fatalf("version %d, HasTruth %v", r.Header().FormatVersion, r.HasTruth())
	}
	var got []TruthRecord
	r.OnTruth(func(rec *TruthRecord) {
		cp := *rec
		cp.Truth.Hard = append([]detector.Process(nil), rec.Truth.Hard...)
		cp.Truth.Objects = append([]detector.TruthObject(nil), rec.Truth.Objects...)
		got = append(got, cp)
	})
	batches := 0
	for {
		b, err := r.Next()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		k, _ := strconv.Atoi(strings.TrimPrefix(string(b.Data), "crossing-"))
		if k >= len(got) {
			t.Fatalf("batch of crossing %d read before its truth (%d records so far)", k, len(got))
		}
		batches++
	}
	if batches != n || len(got) != n {
		t.Fatalf("%d batches and %d truth records, want %d of each", batches, len(got), n)
	}
	forced := 0
	for i, rec := range got {
		c := made[i]
		want := TruthRecord{N: c.N, Orbit: c.Orbit, Bcid: c.Bcid, Interactions: c.Interactions,
			TrueMETx: c.TrueMETx, TrueMETy: c.TrueMETy, Truth: c.Truth}
		if len(want.Truth.Hard) == 0 {
			want.Truth.Hard = []detector.Process{}
		}
		if len(want.Truth.Objects) == 0 {
			want.Truth.Objects = []detector.TruthObject{}
		}
		if !reflect.DeepEqual(rec, want) {
			t.Fatalf("crossing %d: read %+v, wrote %+v", i, rec, want)
		}
		if rec.Truth.Process == detector.ProcessWmunu && rec.Truth.Weight > 0 {
			forced++
		}
	}
	if forced != n {
		t.Errorf("%d of %d crossings carry the forced process and its weight", forced, n)
	}

	plain, err := readAll(path)
	if err != nil || len(plain) != n {
		t.Fatalf("without OnTruth: %d batches, %v", len(plain), err)
	}
}

// A file made by Create stays version 1 and refuses truth records.
func TestTruthNeedsVersion2(t *testing.T) {
	path := filepath.Join(t.TempDir(), "v1.bss")
	w, err := Create(path, &pb.StreamHeader{})
	if err != nil {
		t.Fatal(err)
	}
	if err := w.WriteTruth(&detector.Crossing{}); !errors.Is(err, ErrNoTruth) {
		t.Errorf("WriteTruth on a version 1 file: %v", err)
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	r, err := Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	if r.HasTruth() || r.Header().FormatVersion != FormatVersion {
		t.Errorf("version %d, HasTruth %v", r.Header().FormatVersion, r.HasTruth())
	}
}
