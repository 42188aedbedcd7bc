package recording

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"testing"

	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

// writeSample writes n batches in frames small enough that the file holds
// several frames, and returns the path and the batches written.
func writeSample(t *testing.T, n, size int) (string, [][]byte) {
	t.Helper()
	path := filepath.Join(t.TempDir(), "s.bss")
	w, err := Create(path, &pb.StreamHeader{Run: 7, Seed: 3, SourceIds: []uint32{1, 2}, Producer: "test"})
	if err != nil {
		t.Fatal(err)
	}
	w.target = 16 << 10 // many frames, so damage leaves intact ones before it
	var sent [][]byte
	for i := 0; i < n; i++ {
		// Repetitive content compresses, so both codecs occur below.
		data := bytes.Repeat([]byte(fmt.Sprintf("batch-%04d;", i)), size)
		if i%3 == 0 {
			data = []byte(fmt.Sprintf("%d", i*7919))
		}
		if err := w.WriteBatch(uint32(i%2+1), i%3, int64(i)*25, data, i%5+1); err != nil {
			t.Fatal(err)
		}
		sent = append(sent, data)
	}
	w.AddCrossings(uint64(n))
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	return path, sent
}

func readAll(path string) ([]Batch, error) {
	r, err := Open(path)
	if err != nil {
		return nil, err
	}
	defer r.Close()
	var got []Batch
	for {
		b, err := r.Next()
		if errors.Is(err, io.EOF) {
			return got, nil
		}
		if err != nil {
			return got, err
		}
		b.Data = append([]byte(nil), b.Data...)
		got = append(got, b)
	}
}

func TestRoundTrip(t *testing.T) {
	path, sent := writeSample(t, 3000, 40)
	r, err := Open(path)
	if err != nil {
		t.Fatal(err)
	}
	if h := r.Header(); h.Run != 7 || h.Seed != 3 || h.FormatVersion != FormatVersion {
		t.Fatalf("header %+v", h)
	}
	r.Close()
	got, err := readAll(path)
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != len(sent) {
		t.Fatalf("read %d batches, wrote %d", len(got), len(sent))
	}
	for i, b := range got {
		if !bytes.Equal(b.Data, sent[i]) || b.SourceID != uint32(i%2+1) || b.Partition != i%3 ||
			b.FirstTimestampNs != int64(i)*25 || b.Fragments != i%5+1 {
			t.Fatalf("batch %d differs: %+v", i, b)
		}
	}
	info, _ := os.Stat(path)
	raw := 0
	for _, s := range sent {
		raw += len(s)
	}
	if info.Size() >= int64(raw) {
		t.Errorf("file %d bytes for %d bytes of repetitive batches: compression did not pay", info.Size(), raw)
	}
}

// A file cut anywhere gives a truncation error naming an offset at or
// before the cut, and every batch of the frames before the cut intact.
func TestTruncatedFile(t *testing.T) {
	path, sent := writeSample(t, 3000, 40)
	data, _ := os.ReadFile(path)
	for _, cut := range []int{3, len(Magic) + 5, len(data) / 3, len(data) / 2, len(data) - 20, len(data) - 1} {
		short := filepath.Join(t.TempDir(), "cut.bss")
		if err := os.WriteFile(short, data[:cut], 0o644); err != nil {
			t.Fatal(err)
		}
		got, err := readAll(short)
		var fe *FormatError
		if !errors.As(err, &fe) || !errors.Is(err, ErrTruncated) {
			t.Fatalf("cut at %d: error %v, want a truncation FormatError", cut, err)
		}
		if fe.Offset > int64(cut) {
			t.Errorf("cut at %d: error names offset %d past the cut", cut, fe.Offset)
		}
		for i, b := range got {
			if !bytes.Equal(b.Data, sent[i]) {
				t.Fatalf("cut at %d: batch %d delivered damaged", cut, i)
			}
		}
		if cut > len(data)/2 && len(got) == 0 {
			t.Errorf("cut at %d of %d: no batch delivered", cut, len(data))
		}
	}
}

// A flipped byte inside a frame gives a corruption error at that frame's
// offset, after the intact batches before it.
func TestCorruptedFile(t *testing.T) {
	path, sent := writeSample(t, 3000, 40)
	data, _ := os.ReadFile(path)
	bad := append([]byte(nil), data...)
	at := len(bad) * 2 / 3
	bad[at] ^= 0x40
	p := filepath.Join(t.TempDir(), "bad.bss")
	if err := os.WriteFile(p, bad, 0o644); err != nil {
		t.Fatal(err)
	}
	got, err := readAll(p)
	var fe *FormatError
	if !errors.As(err, &fe) || !errors.Is(err, ErrCorrupt) {
		t.Fatalf("error %v, want a corruption FormatError", err)
	}
	if fe.Offset > int64(at) || len(got) == 0 {
		t.Errorf("offset %d for damage at %d, %d batches before it", fe.Offset, at, len(got))
	}
	for i, b := range got {
		if !bytes.Equal(b.Data, sent[i]) {
			t.Fatalf("batch %d delivered damaged", i)
		}
	}
	if msg := err.Error(); !bytes.Contains([]byte(msg), []byte(fmt.Sprintf("byte offset %d", fe.Offset))) {
		t.Errorf("message %q does not name the offset", msg)
	}
}

func TestNotAStream(t *testing.T) {
	p := filepath.Join(t.TempDir(), "x")
	os.WriteFile(p, []byte("rules: {}\n and more text than a header"), 0o644)
	if _, err := Open(p); !errors.Is(err, ErrCorrupt) {
		t.Fatalf("error %v, want corrupt", err)
	}
}

// FuzzReader feeds arbitrary bytes after a valid header: the reader must
// never panic and must end with EOF or a FormatError.
func FuzzReader(f *testing.F) {
	dir := f.TempDir()
	path := filepath.Join(dir, "seed.bss")
	w, _ := Create(path, &pb.StreamHeader{Run: 1})
	w.WriteBatch(1, 0, 0, []byte("hello"), 1)
	w.Close()
	good, _ := os.ReadFile(path)
	f.Add(good)
	f.Add(good[:len(good)-3])
	f.Fuzz(func(t *testing.T, data []byte) {
		p := filepath.Join(t.TempDir(), "f.bss")
		if err := os.WriteFile(p, data, 0o644); err != nil {
			t.Fatal(err)
		}
		_, err := readAll(p)
		var fe *FormatError
		if err != nil && !errors.As(err, &fe) {
			t.Fatalf("error %v is not a FormatError", err)
		}
	})
}

// A clone reads the same batches as the reader it came from, through a
// position of its own, interleaved with it; both read the file as long as
// it was when the first was opened, so bytes appended later (a file still
// being written) are seen by neither, and both end at the same place.
func TestCloneReadsTheSameBytes(t *testing.T) {
	path, sent := writeSample(t, 3000, 40)
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	// Keep the first two thirds only: the copy ends inside a frame.
	cut := filepath.Join(t.TempDir(), "growing.bss")
	if err := os.WriteFile(cut, data[:len(data)*2/3], 0o644); err != nil {
		t.Fatal(err)
	}
	r, err := Open(cut)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	c, err := r.Clone()
	if err != nil {
		t.Fatal(err)
	}
	// Closing a clone leaves the file open for the others.
	if c2, err := r.Clone(); err != nil || c2.Close() != nil {
		t.Fatalf("clone: %v", err)
	}
	// The rest of the file arrives after both were opened.
	f, err := os.OpenFile(cut, os.O_APPEND|os.O_WRONLY, 0)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := f.Write(data[len(data)*2/3:]); err != nil {
		t.Fatal(err)
	}
	f.Close()
	var errs [2]error
	n := 0
	for errs[0] == nil || errs[1] == nil {
		var got [2]Batch
		for i, rd := range []*Reader{r, c} {
			if errs[i] == nil {
				got[i], errs[i] = rd.Next()
			}
		}
		if errs[0] != nil || errs[1] != nil {
			continue
		}
		if !bytes.Equal(got[0].Data, got[1].Data) || !bytes.Equal(got[0].Data, sent[n]) {
			t.Fatalf("batch %d differs between the reader, its clone and what was written", n)
		}
		n++
	}
	if n == 0 || n >= len(sent) || !errors.Is(errs[0], ErrTruncated) || errs[0].Error() != errs[1].Error() {
		t.Fatalf("after %d of %d batches: reader %v, clone %v; want both to end truncated at the same place", n, len(sent), errs[0], errs[1])
	}
}
