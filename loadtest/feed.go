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
	// Tick is the shortest sleep of a feed at a fixed rate: once ahead of
	// schedule it sleeps at least this long and then publishes everything
	// that has fallen due, so a wake-up (and the hand-offs it sets off
	// between the NATS goroutines) serves many crossings rather than one.
	// The rate is kept exactly; a crossing goes out up to Tick after its
	// due time and never before, stamped with the time its batches went
	// out (see Run). Zero means 200 µs; negative means sleeping to each
	// crossing's own due time.
	Tick time.Duration

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

// defaultFeedTick is Feed.Tick's zero value.
const defaultFeedTick = 200 * time.Microsecond

// gateEvery is how many batches a feed publishes between calls of its Gate.
const gateEvery = 1024

// FeedStats is what a feed published.
type FeedStats struct {
	Crossings, Batches, Fragments uint64
	Bytes                         int64
	// Laps is how many passes over the dataset the run took (a started
	// pass counts).
	Laps uint64
	// First is when the feed started, the zero of its schedule (the first
	// batch goes out then, or when it falls due); Last is the time of the
	// last batch publish.
	First, Last time.Time
	// Behind is the largest lag behind schedule beyond the feed's Tick, a
	// sign that the publisher itself could not keep the rate.
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
	tick := f.Tick
	if tick == 0 {
		tick = defaultFeedTick
	}
	var frags uint64
	// The clock is read once per crossing group (the batches of the
	// sources for the same crossings share a Due), just before the group's
	// first publish, and serves as both the pacing check and the publish
	// stamp of the whole group: time.Now costs 80-100 ns on a virtual
	// machine's clock, as much as half of a small publish. A later batch
	// of the group is stamped a few µs early, which can only lengthen the
	// measured latency.
	var now time.Time
	lastDue := ^uint64(0)
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
			if due != lastDue {
				lastDue = due
				now = time.Now()
				if rateHz > 0 {
					at := start.Add(time.Duration(float64(due) / rateHz * 1e9))
					if wait := at.Sub(now); wait > 0 {
						if tick > 0 {
							wait = max(wait, tick)
						}
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
						now = time.Now()
					} else if late := -wait - max(tick, 0); late > st.Behind {
						st.Behind = late
					}
				}
			}
			data := ds.Data(b)
			if lap > 0 && !f.Verbatim {
				var err error
				if f.buf, err = f.restamp.Restamp(f.buf[:0], b, lap); err != nil {
					return st, err
				}
				data = f.buf
			}
			if err := f.publish(b.Partition, b.Source, data, now); err != nil {
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
		if err := f.publish(b.Partition, b.Source, ds.Data(b), time.Now()); err != nil {
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

// Offered returns how many crossings Feed.Run offers of ds when asked for
// crossings (zero: one pass): whole batches only, as Run leaves out a
// batch whose last crossing lies beyond the limit, in every share.
func (ds *Dataset) Offered(crossings uint64) uint64 {
	if crossings == 0 {
		crossings = ds.Crossings
	}
	if ds.Crossings == 0 || len(ds.Sources) == 0 {
		return 0
	}
	laps, rest := crossings/ds.Crossings, crossings%ds.Crossings
	frags := laps * ds.Fragments
	for i := range ds.Batches {
		if ds.Batches[i].Due <= rest {
			frags += uint64(ds.Batches[i].Fragments)
		}
	}
	return frags / uint64(len(ds.Sources))
}

// publish stamps data's spare field with the time at and publishes it.
// data is stamped in place: NATS copies it before Publish returns, and only
// this feed publishes from it.
func (f *Feed) publish(partition int, source uint32, data []byte, at time.Time) error {
	ns := uint64(at.UnixNano())
	if protowire.SizeVarint(ns) == stampRoom-1 {
		protowire.AppendVarint(data[len(data)-stampRoom+1:len(data)-stampRoom+1], ns)
	}
	subj := f.subjects[[2]uint32{uint32(partition), source}]
	if err := f.nc.Publish(subj, data); err != nil {
		return fmt.Errorf("loadtest: publish source %d: %w", source, err)
	}
	return nil
}
