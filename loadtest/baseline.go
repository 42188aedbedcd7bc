package loadtest

import (
	"context"
	"errors"
	"fmt"
	"math"
	"sync"
	"sync/atomic"
	"time"

	"github.com/nats-io/nats.go"

	"github.com/bunchsieve/bunchsieve/services/transport"
)

// counter counts the messages and bytes a subscriber received and when
// the last one came.
type counter struct {
	msgs, bytes atomic.Uint64
	last        atomic.Int64 // Unix ns
}

func (c *counter) add(n int) {
	c.bytes.Add(uint64(n))
	c.msgs.Add(1)
	c.last.Store(time.Now().UnixNano())
}

// measureBaseline publishes crossings crossings of ds as fast as possible
// through nw and receives them with no processing: with hops 1 on one
// subscriber per builder share, with hops 2 also republished by each
// share's subscriber in batches of about relayCrossings crossings on the
// built-event subject, where workers subscribers in one queue group take
// them, as the built events travel.
func measureBaseline(ctx context.Context, nw *Network, ds *Dataset, s transport.Subjects, crossings uint64, hops, workers, relayCrossings int) (*Baseline, error) {
	var conns []*nats.Conn
	defer func() {
		for _, nc := range conns {
			nc.Close()
		}
	}()
	conn := func(name string) (*nats.Conn, error) {
		nc, err := nw.Connect(name)
		if err == nil {
			conns = append(conns, nc)
		}
		return nc, err
	}
	ncF, err := conn("loadtest-baseline-feed")
	if err != nil {
		return nil, err
	}
	feed := NewFeed(ds, ncF, s)
	feed.Verbatim = true
	in := make([]*counter, ds.Partitions)
	var relays []*relay
	var subs []*nats.Subscription
	for p := range in {
		nc, err := conn(fmt.Sprintf("loadtest-baseline-recv-%d", p))
		if err != nil {
			return nil, err
		}
		c := &counter{}
		in[p] = c
		h := func(m *nats.Msg) { c.add(len(m.Data)) }
		if hops == 2 {
			r := &relay{nc: nc, subject: s.Built(), every: max(1, relayCrossings*len(ds.Sources)/max(1, meanFragments(ds)))}
			relays = append(relays, r)
			h = func(m *nats.Msg) {
				c.add(len(m.Data))
				r.take(m.Data)
			}
		}
		sub, err := transport.Subscribe(nc, s.FragmentsOf(p), "", h)
		if err != nil {
			return nil, err
		}
		subs = append(subs, sub)
		if err := nc.Flush(); err != nil {
			return nil, fmt.Errorf("loadtest: baseline subscribe: %w", err)
		}
	}
	out := make([]*counter, 0, workers)
	if hops == 2 {
		for w := 0; w < workers; w++ {
			nc, err := conn(fmt.Sprintf("loadtest-baseline-worker-%d", w))
			if err != nil {
				return nil, err
			}
			c := &counter{}
			out = append(out, c)
			sub, err := transport.Subscribe(nc, s.Built(), s.SelectQueue(), func(m *nats.Msg) { c.add(len(m.Data)) })
			if err != nil {
				return nil, err
			}
			subs = append(subs, sub)
			if err := nc.Flush(); err != nil {
				return nil, fmt.Errorf("loadtest: baseline subscribe: %w", err)
			}
		}
	}

	interest := []string{s.Fragments(0, ds.Sources[0])}
	for p := 1; p < ds.Partitions; p++ {
		interest = append(interest, s.Fragments(p, ds.Sources[0]))
	}
	if hops == 2 {
		interest = append(interest, s.Built())
	}
	if err := nw.AwaitInterest(interest, 10*time.Second); err != nil {
		return nil, err
	}

	// Flow control: the feed waits while more than window batches are in
	// flight, so the baseline measures what the transport sustains rather
	// than how fast it can fill its queues, and no queue overflows.
	const window = 32 * gateEvery
	sumMsgs := func(cs []*counter) (n uint64) {
		for _, c := range cs {
			n += c.msgs.Load()
		}
		return n
	}
	feed.Gate = func(published uint64) {
		for ctx.Err() == nil {
			inFlight := published - min(published, sumMsgs(in))
			if hops == 2 {
				var relayed uint64
				for _, r := range relays {
					relayed += r.count()
				}
				inFlight += (relayed - min(relayed, sumMsgs(out))) * uint64(relays[0].every)
			}
			if inFlight <= window {
				return
			}
			time.Sleep(50 * time.Microsecond)
		}
	}
	u0, s0 := cpuTime()
	st, err := feed.Run(ctx, crossings, 0, nil)
	if err != nil {
		return nil, err
	}
	wantIn := st.Batches + uint64(len(ds.Ends))
	deadline := time.Now().Add(time.Minute)
	sum := func(cs []*counter) (msgs, bytes uint64, last int64) {
		for _, c := range cs {
			msgs += c.msgs.Load()
			bytes += c.bytes.Load()
			last = max(last, c.last.Load())
		}
		return msgs, bytes, last
	}
	for {
		gotIn, _, _ := sum(in)
		done := gotIn >= wantIn
		if done && hops == 2 {
			var relayed uint64
			for _, r := range relays {
				relayed += r.flushed()
			}
			gotOut, _, _ := sum(out)
			done = gotOut >= relayed
		}
		dropped := uint64(0)
		for _, sub := range subs {
			if n, err := sub.Dropped(); err == nil {
				dropped += uint64(n)
			}
		}
		if done || dropped > 0 {
			break
		}
		if ctx.Err() != nil {
			return nil, fmt.Errorf("loadtest: baseline: %w", ctx.Err())
		}
		if time.Now().After(deadline) {
			return nil, errors.New("loadtest: baseline messages did not all arrive within a minute")
		}
		time.Sleep(time.Millisecond)
	}
	u1, s1 := cpuTime()
	msgsIn, bytesIn, lastIn := sum(in)
	msgsOut, bytesOut, lastOut := sum(out)
	end := time.Unix(0, max(lastIn, lastOut))
	dur := end.Sub(st.First).Seconds()
	b := &Baseline{Hops: hops, Crossings: st.Crossings, Messages: msgsIn + msgsOut, Bytes: int64(bytesIn + bytesOut), DurationS: dur, Runs: 1}
	for _, sub := range subs {
		if n, err := sub.Dropped(); err == nil {
			b.Dropped += uint64(n)
		}
	}
	if dur > 0 {
		b.CrossingsPerS = float64(st.Crossings) / dur
		b.MessagesPerS = float64(b.Messages) / dur
		b.MBPerS = float64(b.Bytes) / dur / 1e6
		b.CPU = cpuUse(u1-u0, s1-s0, dur, st.Crossings)
	}
	b.MinCrossingsPerS = b.CrossingsPerS
	return b, nil
}

// meanFragments is the mean number of fragments per batch.
func meanFragments(ds *Dataset) int {
	if len(ds.Batches) == 0 {
		return 1
	}
	return int(math.Round(float64(ds.Fragments) / float64(len(ds.Batches))))
}

// relay republishes what one share's subscriber receives, every messages
// at a time concatenated into one, the way a builder publishes events in
// batches. It is called from one subscription goroutine.
type relay struct {
	nc      *nats.Conn
	subject string
	every   int
	buf     []byte
	n       int
	mu      sync.Mutex
	sent    uint64
}

func (r *relay) take(data []byte) {
	r.mu.Lock()
	defer r.mu.Unlock()
	r.buf = append(r.buf, data...)
	r.n++
	if r.n >= r.every {
		r.publish()
	}
}

func (r *relay) publish() {
	if r.n == 0 {
		return
	}
	if err := r.nc.Publish(r.subject, r.buf); err == nil {
		r.sent++
	}
	r.buf, r.n = r.buf[:0], 0
}

// count returns how many messages went out so far.
func (r *relay) count() uint64 {
	r.mu.Lock()
	defer r.mu.Unlock()
	return r.sent
}

// flushed sends what is left and returns how many messages went out.
func (r *relay) flushed() uint64 {
	r.mu.Lock()
	defer r.mu.Unlock()
	r.publish()
	_ = r.nc.Flush()
	return r.sent
}

func cpuUse(user, sys time.Duration, wallS float64, events uint64) CPUUse {
	c := CPUUse{UserS: user.Seconds(), SysS: sys.Seconds()}
	if wallS > 0 {
		c.Cores = (c.UserS + c.SysS) / wallS
	}
	if events > 0 {
		c.MicrosPerEvent = (c.UserS + c.SysS) / float64(events) * 1e6
	}
	return c
}
