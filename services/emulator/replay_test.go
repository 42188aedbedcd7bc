package emulator

import (
	"context"
	"errors"
	"sync"
	"testing"
	"time"

	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/recording"
)

// Crossings are numbered from their timestamps as the generators number
// them (detector.FillingScheme.Crossing gives the n-th colliding crossing,
// detector.Clock its nominal time): every n comes back, in trains, gaps
// and later orbits alike, and a few ns of clock skew change nothing.
func TestCrossingOrdinals(t *testing.T) {
	d := detector.DefaultDescription()
	ord, err := newCrossingOrdinals(&pb.StreamHeader{})
	if err != nil {
		t.Fatal(err)
	}
	clock := detector.DefaultClock()
	nb := uint64(d.Filling.Colliding())
	for _, n := range []uint64{0, 1, 2, 47, nb - 1, nb, nb + 1, 7*nb + 123, 1000*nb + nb/2} {
		o, b := d.Filling.Crossing(n)
		ts := clock.Nominal(o, b)
		for _, skew := range []int64{0, -3, 5} {
			if got := ord.of(ts + skew); got != n {
				t.Errorf("crossing %d (orbit %d, bcid %d) at %d ns %+d: ordinal %d", n, o, b, ts, skew, got)
			}
		}
	}
	if _, err := newCrossingOrdinals(&pb.StreamHeader{Detector: "not: [yaml"}); err == nil {
		t.Error("a header with a broken description paced anyway")
	}
}

type timedSink struct {
	mu   sync.Mutex
	at   []time.Duration
	ts   []int64
	zero time.Time
}

func (s *timedSink) Send(_ int, _ uint32, firstTs int64, _ []byte, _ int) error {
	s.mu.Lock()
	defer s.mu.Unlock()
	s.at = append(s.at, time.Since(s.zero))
	s.ts = append(s.ts, firstTs)
	return nil
}
func (s *timedSink) Flush() error { return nil }

// A paced replay never sends a batch before it is due (a lower bound
// only: how much later it goes depends on the machine), and sends all.
func TestReplayAtARateSendsNothingEarly(t *testing.T) {
	path := recordSample(t, 2000)
	r, err := recording.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	ord, err := newCrossingOrdinals(r.Header())
	if err != nil {
		t.Fatal(err)
	}
	const rate = 40000.0 // 2000 crossings in 50 ms
	sink := &timedSink{zero: time.Now()}
	st, err := Replay(context.Background(), r, sink, Pace{RateHz: rate})
	if err != nil {
		t.Fatal(err)
	}
	if st.Batches == 0 || int(st.Batches) != len(sink.at) {
		t.Fatalf("%d batches replayed, %d sent", st.Batches, len(sink.at))
	}
	var last uint64
	for i := range sink.at {
		n := ord.of(sink.ts[i]) - ord.of(sink.ts[0])
		if due := time.Duration(float64(n) / rate * float64(time.Second)); sink.at[i] < due {
			t.Fatalf("batch %d (crossing %d) sent %v after the start, due at %v", i, n, sink.at[i], due)
		}
		last = max(last, n)
	}
	// The emulator's batches hold 32 crossings: the last start at 1984.
	if last != 1984 {
		t.Errorf("the last batch starts at crossing %d, want 1984", last)
	}
}

// A rate so low that the waits overflow int64 nanoseconds still waits: the
// first crossing's batches (one per source) go at once, the next
// crossing's not before the replay is stopped (a wrapped-around wait once
// sent every batch at once).
func TestReplayAtATinyRateWaits(t *testing.T) {
	for _, pace := range []Pace{{RateHz: 1e-9}, {Speed: 1e-12}} {
		path := recordSample(t, 2000)
		r, err := recording.Open(path)
		if err != nil {
			t.Fatal(err)
		}
		ctx, cancel := context.WithTimeout(context.Background(), 100*time.Millisecond)
		sink := &timedSink{zero: time.Now()}
		_, err = Replay(ctx, r, sink, pace)
		cancel()
		r.Close()
		if !errors.Is(err, context.DeadlineExceeded) || len(sink.at) == 0 {
			t.Fatalf("%+v: %d batches sent, %v; want the first crossing's, then a wait cut short", pace, len(sink.at), err)
		}
		for i, ts := range sink.ts {
			if ts != sink.ts[0] {
				t.Errorf("%+v: batch %d, of a later crossing (timestamp %d after %d), sent before the stop", pace, i, ts, sink.ts[0])
				break
			}
		}
	}
}
