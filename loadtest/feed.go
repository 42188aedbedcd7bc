package loadtest

import (
	"context"
	"fmt"
	"time"

	"github.com/nats-io/nats.go"
	"google.golang.org/protobuf/encoding/protowire"

	"github.com/bunchsieve/bunchsieve/services/transport"
)

// Feed publishes a Dataset's batches on one NATS connection, at a fixed
// crossing rate or as fast as it can. It is not safe for concurrent use.
type Feed struct {
	// Verbatim repeats later laps as they are instead of restamping them,
	// for receivers that look at no content (the raw-transport baseline).
	Verbatim bool
	// Gate, when not nil, is called after every gateEvery batches with the
	// number published so far, and may block to hold the feed back until
	// the receivers catch up (the baseline's flow control).
	Gate func(batches uint64)

	ds       *Dataset
	nc       *nats.Conn
	subjects map[[2]uint32]string
	restamp  *Restamper
	buf      []byte
}

// NewFeed returns a feed of ds publishing on nc under the subjects s.
func NewFeed(ds *Dataset, nc *nats.Conn, s transport.Subjects) *Feed {
	f := &Feed{ds: ds, nc: nc, subjects: map[[2]uint32]string{}, restamp: NewRestamper(ds)}
	for p := 0; p < ds.Partitions; p++ {
		for _, id := range ds.Sources {
			f.subjects[[2]uint32{uint32(p), id}] = s.Fragments(p, id)
		}
	}
	return f
}

// gateEvery is how many batches a feed publishes between calls of its Gate.
const gateEvery = 1024

// FeedStats is what a feed published.
type FeedStats struct {
	Crossings, Batches, Fragments uint64
	Bytes                         int64
	// Laps is how many passes over the dataset the run took (a started
	// pass counts).
	Laps uint64
	// First and Last are the times of the first and last batch publish.
	First, Last time.Time
	// Behind is the largest lag behind schedule, a sign that the publisher
	// itself could not keep the rate.
	Behind time.Duration
}

// Run offers crossings crossings, whole batches only, at rateHz crossings
// per second (zero or less: as fast as possible), then publishes the
// end-of-run markers and flushes. progress, if not nil, is called with the
// crossings offered so far about every 4096 batches. It stops early, still
// sending the markers, when ctx ends.
func (f *Feed) Run(ctx context.Context, crossings uint64, rateHz float64, progress func(uint64)) (FeedStats, error) {
	var st FeedStats
	ds := f.ds
	if crossings == 0 {
		crossings = ds.Crossings
	}
	start := time.Now()
	st.First = start
	var timer *time.Timer
	defer func() {
		if timer != nil {
			timer.Stop()
		}
	}()
	sources := uint64(len(ds.Sources))
	var frags uint64
outer:
	for lap := uint64(0); ; lap++ {
		base := lap * ds.Crossings
		if base >= crossings {
			break
		}
		st.Laps++
		for i := range ds.Batches {
			b := &ds.Batches[i]
			due := base + b.Due
			if due > crossings {
				continue
			}
			if st.Batches%256 == 0 && ctx.Err() != nil {
				break outer
			}
			if rateHz > 0 {
				at := start.Add(time.Duration(float64(due) / rateHz * 1e9))
				if wait := time.Until(at); wait > 0 {
					if timer == nil {
						timer = time.NewTimer(wait)
					} else {
						timer.Reset(wait)
					}
					select {
					case <-ctx.Done():
						break outer
					case <-timer.C:
					}
				} else if -wait > st.Behind {
					st.Behind = -wait
				}
			}
			data := b.Data
			if lap > 0 && !f.Verbatim {
				var err error
				if f.buf, err = f.restamp.Restamp(f.buf[:0], b, lap); err != nil {
					return st, err
				}
				data = f.buf
			}
			if err := f.publish(b.Partition, b.Source, data); err != nil {
				return st, err
			}
			st.Batches++
			st.Bytes += int64(len(data))
			if f.Gate != nil && st.Batches%gateEvery == 0 {
				f.Gate(st.Batches)
			}
			frags += uint64(b.Fragments)
			if progress != nil && st.Batches%4096 == 0 {
				progress(frags / sources)
			}
		}
	}
	st.Fragments = frags
	// Every source reports every crossing in a stream without faults, so
	// this is the number of crossings offered.
	st.Crossings = frags / sources
	st.Last = time.Now()
	for i := range ds.Ends {
		b := &ds.Ends[i]
		if err := f.publish(b.Partition, b.Source, b.Data); err != nil {
			return st, err
		}
	}
	if err := f.nc.Flush(); err != nil {
		return st, fmt.Errorf("loadtest: feed flush: %w", err)
	}
	if progress != nil {
		progress(st.Crossings)
	}
	return st, nil
}

// publish stamps data's spare field with the time and publishes it. data
// is stamped in place: NATS copies it before Publish returns, and only
// this feed publishes from it.
func (f *Feed) publish(partition int, source uint32, data []byte) error {
	now := uint64(time.Now().UnixNano())
	if protowire.SizeVarint(now) == stampRoom-1 {
		protowire.AppendVarint(data[len(data)-stampRoom+1:len(data)-stampRoom+1], now)
	}
	subj := f.subjects[[2]uint32{uint32(partition), source}]
	if err := f.nc.Publish(subj, data); err != nil {
		return fmt.Errorf("loadtest: publish source %d: %w", source, err)
	}
	return nil
}
