// Package assembler is the event-builder service: it feeds fragment batches
// from NATS into the builder library, publishes built events in batches to
// the selection, and exports the builder's accounting as metrics.
package assembler

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"os"
	"sync"
	"sync/atomic"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/prometheus/client_golang/prometheus"
	"google.golang.org/protobuf/proto"

	"github.com/bunchsieve/bunchsieve/builder"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/telemetry"
	"github.com/bunchsieve/bunchsieve/services/transport"
)

// Config sets up the builder service. Builder holds the library settings
// (expected sources, lateness, window, ...).
type Config struct {
	Builder builder.Config
	// Instance is this builder's share, 0..Instances-1.
	Instance int
	// Instances is the number of builders sharing the crossings; zero
	// means 1.
	Instances int
	// LumiSliceOrbits is the length of a lumi slice in orbits; zero means
	// 2^18.
	LumiSliceOrbits uint64
	// BatchEvents is how many events one published batch carries at most;
	// zero means 64.
	BatchEvents int
	// Tick is how often watermarks and dead sources are checked and partly
	// filled batches published; zero means 2 ms.
	Tick time.Duration
	// Linger is how long a partly filled batch of events may wait for more
	// once no fragment batch is queued: it goes out when the queue runs
	// empty and its first event is at least this old, and otherwise on the
	// next tick, so it may not exceed Tick (New fails). Zero or negative
	// means as soon as the queue runs empty. Waiting fills the batches
	// when fragments come one crossing per message (the selection then
	// gets full batches instead of a message for every few events, which
	// cost a quarter more processor time per crossing); with many
	// crossings per message the batches fill anyway and waiting cost both
	// latency and throughput (docs/performance.md, "The targets").
	Linger time.Duration
	// StateFile, if not empty, lets a builder stop and restart within a
	// run (see Run): an interrupted Run writes where it stopped to this
	// file, and New resumes from it when it holds the same run and share.
	// Empty means an interruption ends this builder's part of the run.
	StateFile string
	// CatchUp, when not nil, is where a builder resuming from StateFile
	// finds the fragment batches published while no builder ran (the
	// durable capture stream: capture.Backlog): before it takes any live
	// batch, Run reads from it every batch of this share stored since
	// CatchUpMargin before the previous builder stopped, and takes those
	// that builder had not taken; a batch read there and again live is
	// taken once. Nil means none: those batches are lost to core NATS.
	CatchUp Backlog
	// CatchUpMargin is how far before the previous builder's stop the
	// catch-up starts reading, for batches published just before it
	// stopped that had not reached it, and for clocks that differ
	// between the builder and the NATS server that stamps the stored
	// batches; zero means 2 s.
	CatchUpMargin time.Duration
	Subjects      transport.Subjects
	// Logger receives rate-limited reports of discarded fragments; nil
	// means slog.Default().
	Logger *slog.Logger
}

// Backlog is a store of the fragment batches published on the NATS
// deployment, read to catch up after a restart (Config.CatchUp).
type Backlog interface {
	// Since hands take every stored batch on subjects matching subject
	// that the store received at or after since, in the order stored,
	// with the subject it was published on, until take says it has
	// enough (more false) or the store has had nothing new for a while.
	// It stops at take's first error and returns it; data is not reused
	// after take returns.
	Since(ctx context.Context, subject string, since time.Time, take func(subject string, data []byte) (more bool, err error)) error
}

// maxBatchBytes keeps an event batch well under the NATS payload limit.
const maxBatchBytes = 768 << 10

// Assembler runs one builder instance. Run may be called once; Stats and
// the counters are safe to read concurrently.
type Assembler struct {
	cfg Config
	nc  *nats.Conn
	m   *metrics
	log *slog.Logger

	mu        sync.Mutex // guards everything below, and the builder
	b         *builder.Builder
	pool      *fragmentPool
	in        wireBatch
	out       []byte // the batch being filled: batchHeadRoom bytes, then events
	events    int    // events in out
	firstNs   int64  // when the first event in out was emitted (Unix ns)
	enc       builtEvent
	holders   []*heldFragment // scratch of emit
	head      []byte
	seq       uint64
	emitted   uint64
	ended     map[uint32]bool
	pubErr    error
	lastLog   time.Time
	suppress  int
	undecoded uint64
	// held are the fragments the builder refused for want of room (policy
	// Block), with their send times, waiting to be offered again; at
	// heldLimit of them the oldest crossings are evicted to let them in
	// (evictForHeldLocked).
	held      []heldOffer
	heldLimit int
	heldTried uint64 // a.emitted when held was last offered again
	// bytesIn counts the encoded batch bytes of each expected source, at
	// its sourceIndex (the metrics export no other source's).
	bytesIn     []uint64
	sourceIndex map[uint32]int

	resumed bool
	// With StateFile: the highest batch sequence number taken from each
	// source (builderState.LastBatch), and when the builder stopped
	// taking batches (set by Run).
	lastBatch map[uint32]uint64
	lastSent  map[uint32]int64
	stoppedNs int64
	// dedupe is set while the catch-up reads the stream: a batch at or
	// below lastBatch of its source is passed over and counted in
	// repeated. liveUpTo then holds, per source, the highest batch taken
	// when the reading ended: a live batch at or below it came both ways
	// and is passed over, until one at or above it has come. A source's
	// batches arrive live in the order sent (one connection each), so
	// after that a lower number is a readout started again, and taken.
	// A batch sent after every batch of its source taken (lastSent) is
	// new in either mode: a readout started again while none ran.
	dedupe     bool
	liveUpTo   map[uint32]uint64
	resumeFrom *builderState
	caughtUp   uint64
	repeated   uint64

	done    chan struct{}
	ready   chan struct{}
	dropped atomic.Uint64

	Latency telemetry.Latency // first fragment to emission
}

// New returns a builder service on nc with metrics on reg.
func New(cfg Config, nc *nats.Conn, reg prometheus.Registerer) (*Assembler, error) {
	if cfg.Instances == 0 {
		cfg.Instances = 1
	}
	if cfg.Instance < 0 || cfg.Instance >= cfg.Instances {
		return nil, fmt.Errorf("assembler: instance %d of %d, want 0..%d", cfg.Instance, cfg.Instances, cfg.Instances-1)
	}
	if cfg.LumiSliceOrbits == 0 {
		cfg.LumiSliceOrbits = 1 << 18
	}
	if cfg.BatchEvents == 0 {
		cfg.BatchEvents = 64
	}
	if cfg.Tick == 0 {
		cfg.Tick = 2 * time.Millisecond
	}
	if cfg.Linger > cfg.Tick {
		// The tick publishes whatever has waited: a longer linger would
		// not be what it says.
		return nil, fmt.Errorf("assembler: linger %v is longer than the tick %v", cfg.Linger, cfg.Tick)
	}
	if cfg.Logger == nil {
		cfg.Logger = slog.Default()
	}
	if err := cfg.Subjects.Validate(); err != nil {
		return nil, err
	}
	a := &Assembler{cfg: cfg, nc: nc, log: cfg.Logger, ended: make(map[uint32]bool), done: make(chan struct{}), ready: make(chan struct{}),
		pool: newFragmentPool(), out: make([]byte, batchHeadRoom, 64<<10)}
	a.sourceIndex = make(map[uint32]int, len(cfg.Builder.Sources))
	for i, id := range cfg.Builder.Sources {
		if _, dup := a.sourceIndex[id]; !dup {
			a.sourceIndex[id] = i
		}
	}
	a.bytesIn = make([]uint64, len(cfg.Builder.Sources))
	// A window's worth of every source's fragments: sources can be that
	// far ahead of the crossings the window waits on before room is made.
	window := cfg.Builder.Window
	if window == 0 {
		window = builder.DefaultWindow
	}
	a.heldLimit = window * max(len(cfg.Builder.Sources), 1)
	b, err := builder.New(cfg.Builder, a.emit)
	if err != nil {
		return nil, fmt.Errorf("assembler: %w", err)
	}
	a.b = b
	m, err := newMetrics(reg, a)
	if err != nil {
		return nil, err
	}
	a.m = m
	if cfg.StateFile != "" {
		st, err := readState(cfg.StateFile)
		if err != nil {
			return nil, err
		}
		if st != nil {
			if st.Run != cfg.Builder.Run || st.Instance != cfg.Instance || st.Instances != cfg.Instances {
				return nil, fmt.Errorf("assembler: state file %s is of run %d, builder %d of %d, not run %d, builder %d of %d: remove it to start afresh",
					cfg.StateFile, st.Run, st.Instance, st.Instances, cfg.Builder.Run, cfg.Instance, cfg.Instances)
			}
			a.b.Resume(st.ClosedNs)
			a.seq, a.emitted, a.resumed, a.resumeFrom = st.Seq, st.Emitted, true, st
			a.lastBatch, a.lastSent = st.LastBatch, st.LastSent
		}
		if a.lastBatch == nil {
			a.lastBatch = make(map[uint32]uint64, len(cfg.Builder.Sources))
		}
		if a.lastSent == nil {
			a.lastSent = make(map[uint32]int64, len(cfg.Builder.Sources))
		}
	}
	if cfg.CatchUpMargin == 0 {
		a.cfg.CatchUpMargin = 2 * time.Second
	}
	return a, nil
}

// Resumed reports whether New took up a run from its state file.
func (a *Assembler) Resumed() bool { return a.resumed }

// Run subscribes to this instance's share of the fragments and builds
// events until every expected source has sent its end-of-run marker (or ctx
// ends), then flushes the builder and publishes the
// end-of-run batch, on the built-event subject and again on the end
// subject that every selection worker receives. It returns the first
// publishing error, if any.
//
// With Config.StateFile, an end of ctx is a pause: the open crossings are
// flushed and published, but no end-of-run batch, and the closing time,
// the batch sequence and the events emitted are written to the state file
// for the builder that takes over (New). Every crossing is then emitted
// once by the two together; fragments for crossings the first one emitted
// count as late in the second. Fragment batches published while neither
// runs are lost to core NATS (the readout's own counts show how many),
// unless Config.CatchUp gives the second builder a capture stream to read
// them from. Batches queued for this builder when it unsubscribes are
// taken, not dropped. At the end of the run the state file is removed.
//
// Fragment batches are taken on Run's own goroutine from a queue of
// transport.PendingMsgs messages, whatever has queued up (at most
// burstMsgs) under one lock and one clock reading. Built events are
// published when a batch is full, when the queue has run empty and the
// batch's first event is Config.Linger old, and on every tick: while
// fragments keep coming, event batches fill up instead of carrying a few
// events each, and when they stop an event waits a tick at most.
func (a *Assembler) Run(ctx context.Context) error {
	in := make(chan *nats.Msg, transport.PendingMsgs)
	sub, err := transport.SubscribeQueued(a.nc, a.cfg.Subjects.FragmentsOf(a.cfg.Instance), "", in)
	if err != nil {
		return fmt.Errorf("assembler: %w", err)
	}
	if err := a.nc.Flush(); err != nil {
		_ = sub.Unsubscribe()
		return fmt.Errorf("assembler: subscribe: %w", err)
	}
	close(a.ready)
	defer sub.Unsubscribe()
	if a.resumeFrom != nil && a.cfg.CatchUp != nil && a.resumeFrom.StoppedUnixNs > 0 {
		a.catchUp(ctx, in)
	}
	tick := time.NewTicker(a.cfg.Tick)
	defer tick.Stop()
	finished, interrupted := false, false
	for !finished {
		select {
		case msg := <-in:
			a.receive(msg, in)
		case <-ctx.Done():
			finished, interrupted = true, true
		case <-a.done:
			finished = true
		case <-tick.C:
			a.mu.Lock()
			now := time.Now().UnixNano()
			a.b.Advance(now)
			a.retryHeldLocked(now)
			err := a.publishLocked(false)
			a.noteDrops(sub)
			a.mu.Unlock()
			if err != nil {
				return err
			}
		}
	}
	a.mu.Lock()
	defer a.mu.Unlock()
	// Dropped fails once the subscription is closed: count first.
	a.noteDrops(sub)
	_ = sub.Unsubscribe()
	if a.lastBatch != nil {
		a.stoppedNs = time.Now().UnixNano()
	}
	// What had queued up when the subscription closed is taken too, not
	// dropped with it.
	for drained := false; !drained; {
		select {
		case msg := <-in:
			a.takeLocked(msg, time.Now().UnixNano())
		default:
			drained = true
		}
	}
	a.b.Flush()
	// The flush emptied the window: every refused fragment now goes in or
	// is counted (late, as a rule), so none is lost from the accounting.
	a.retryHeldLocked(time.Now().UnixNano())
	a.b.Flush()
	if err := a.publishLocked(false); err != nil {
		return err
	}
	if interrupted && a.cfg.StateFile != "" {
		// A pause, not the end: the selection is not told the run is
		// over, and the next builder on this state file takes up where
		// this one stopped.
		if err := a.nc.Flush(); err != nil {
			return fmt.Errorf("assembler: flush: %w", err)
		}
		st := builderState{Run: a.cfg.Builder.Run, Instance: a.cfg.Instance, Instances: a.cfg.Instances,
			ClosedNs: a.b.Stats().ClosedNs, Seq: a.seq, Emitted: a.emitted, StoppedUnixNs: a.stoppedNs, LastBatch: a.lastBatch, LastSent: a.lastSent}
		return errors.Join(a.pubErr, writeState(a.cfg.StateFile, st))
	}
	if err := a.publishLocked(true); err != nil {
		return err
	}
	if err := a.nc.Flush(); err != nil {
		return fmt.Errorf("assembler: flush: %w", err)
	}
	if a.cfg.StateFile != "" && !interrupted {
		// The run is over: nothing to take up.
		if err := os.Remove(a.cfg.StateFile); err != nil && !errors.Is(err, os.ErrNotExist) {
			return errors.Join(a.pubErr, fmt.Errorf("assembler: %w", err))
		}
	}
	return a.pubErr
}

// catchUp takes the batches of this share that Config.CatchUp stored from
// CatchUpMargin before the previous builder stopped, passing over those
// that builder had taken, until the store reaches the live batches: it
// has given a batch that also came live (all routed before the
// subscription precede it), and, for every source with a live batch
// queued, the one before its first. Neither the store's end when reading
// starts nor the sources seen live so far would do: the store keeps a
// batch a little after the server routes it, and the sources' batches
// interleave in any order. The live batches queued meanwhile
// are then taken, those read from the store already passed over. A
// failure is logged and the builder goes on with the live batches: what
// the catch-up could not read is lost, as it would be without one.
func (a *Assembler) catchUp(ctx context.Context, in chan *nats.Msg) {
	since := time.Unix(0, a.resumeFrom.StoppedUnixNs).Add(-a.cfg.CatchUpMargin)
	a.mu.Lock()
	a.dedupe = true
	a.mu.Unlock()
	var live []*nats.Msg
	firstLive := map[uint32]uint64{} // by expected source
	// overlap is set once the stream has given a batch that also came
	// live: the server stores what it routes in the order it routes it,
	// so every batch routed before the subscription lies before that one
	// in the stream, whichever source or connection it came from.
	overlap := false
	n := 0
	err := a.cfg.CatchUp.Since(ctx, a.cfg.Subjects.FragmentsOf(a.cfg.Instance), since, func(subject string, data []byte) (bool, error) {
		for queued := true; queued; {
			select {
			case m := <-in:
				live = append(live, m)
				if src, seq, ok := batchHeader(m.Data); ok {
					if _, expected := a.sourceIndex[src]; expected {
						if _, seen := firstLive[src]; !seen {
							firstLive[src] = seq
						}
					}
				}
			default:
				queued = false
			}
		}
		if src, seq, ok := batchHeader(data); ok {
			if first, live := firstLive[src]; live && seq >= first {
				overlap = true
			}
		}
		a.mu.Lock()
		defer a.mu.Unlock()
		repeated := a.repeated
		a.takeLocked(&nats.Msg{Subject: subject, Data: data}, time.Now().UnixNano())
		if a.repeated == repeated {
			a.caughtUp++
			a.m.caughtUp.Inc()
		}
		if n++; n%burstMsgs == 0 {
			if err := a.publishLocked(false); err != nil && a.pubErr == nil {
				a.pubErr = err
			}
		}
		return !(overlap && a.reachedLiveLocked(firstLive)), nil
	})
	a.mu.Lock()
	defer a.mu.Unlock()
	a.dedupe = false
	a.liveUpTo = make(map[uint32]uint64, len(a.lastBatch))
	for src, last := range a.lastBatch {
		a.liveUpTo[src] = last
	}
	now := time.Now().UnixNano()
	for _, m := range live {
		a.takeLocked(m, now)
	}
	if perr := a.publishLocked(false); perr != nil && a.pubErr == nil {
		a.pubErr = perr
	}
	if err != nil && ctx.Err() == nil {
		a.log.Error("catch-up from the capture stream failed; batches published while no builder ran may be lost",
			"instance", a.cfg.Instance, "error", err, "taken", a.caughtUp)
		return
	}
	a.log.Info("caught up from the capture stream", "instance", a.cfg.Instance, "taken", a.caughtUp, "passed_over", a.repeated)
}

// reachedLiveLocked reports whether the batches taken so far reach the
// live ones: for every source in firstLive, every batch before its first
// live one. With no live batch yet it is false: the catch-up then ends
// when the store has nothing new. Called with a.mu held.
func (a *Assembler) reachedLiveLocked(firstLive map[uint32]uint64) bool {
	if len(firstLive) == 0 {
		return false
	}
	for src, first := range firstLive {
		if first == 0 {
			continue
		}
		if last, ok := a.lastBatch[src]; !ok || last < first-1 {
			return false
		}
	}
	return true
}

// repeatLocked reports whether batch seq of src, sent at sent (Unix ns,
// 0 if not stamped), was taken already; see dedupe and liveUpTo. A batch
// numbered at or below the highest taken of src but sent after every
// batch of src taken is from a readout started again (numbering from 0)
// and is new, whether it comes from the stream or live: restarted
// reports that, and the source's numbering starts over. Without send
// times the sequence numbers alone decide. Called with a.mu held.
func (a *Assembler) repeatLocked(src uint32, seq uint64, sent int64) (repeat, restarted bool) {
	last, seen := a.lastBatch[src]
	if seen && seq <= last && sent > 0 {
		if prev := a.lastSent[src]; prev > 0 && sent > prev {
			delete(a.liveUpTo, src)
			return false, true
		}
	}
	if a.dedupe {
		return seen && seq <= last, false
	}
	upTo, ok := a.liveUpTo[src]
	if !ok {
		return false, false
	}
	if seq >= upTo {
		delete(a.liveUpTo, src)
	}
	return seq <= upTo, false
}

// repeatedLocked reports whether batch was taken already and, if not,
// records it in lastBatch and lastSent. An end-of-run marker with no
// fragments is never a repeat and leaves the numbering alone: a marker
// taken twice ends the source once, and the marker a replay sends for a
// damaged stream carries no sequence number (0) and a fresh send time,
// which would otherwise read as a readout started again. Called with
// a.mu held.
func (a *Assembler) repeatedLocked(batch *wireBatch) bool {
	if batch.endOfRun && len(batch.frags) == 0 && batch.undecodable == 0 {
		return false
	}
	src := batch.sourceID
	repeat, restarted := a.repeatLocked(src, batch.sequence, batch.sentUnixNs)
	if repeat {
		return true
	}
	if last, seen := a.lastBatch[src]; restarted || !seen || batch.sequence > last {
		a.lastBatch[src] = batch.sequence
	}
	if batch.sentUnixNs > a.lastSent[src] {
		a.lastSent[src] = batch.sentUnixNs
	}
	return false
}

// CatchUpStats returns how many fragment batches a resumed builder took
// from the capture stream (Config.CatchUp) and how many it passed over
// as taken already. It is safe for concurrent use.
func (a *Assembler) CatchUpStats() (caughtUp, repeated uint64) {
	a.mu.Lock()
	defer a.mu.Unlock()
	return a.caughtUp, a.repeated
}

// Ready is closed once Run has subscribed and the server has confirmed
// it: fragments published after that reach this builder.
func (a *Assembler) Ready() <-chan struct{} { return a.ready }

// burstMsgs bounds the fragment batches taken under one lock and one clock
// reading: at a few hundred ns each, their arrival times are then off by
// tens of µs at most, and a tick or a reader of the counters waits no
// longer than that.
const burstMsgs = 64

// receive takes first and whatever else has queued up in in, to burstMsgs
// messages, and publishes the events built so far if in has run empty.
func (a *Assembler) receive(first *nats.Msg, in chan *nats.Msg) {
	a.mu.Lock()
	defer a.mu.Unlock()
	arrival := time.Now().UnixNano()
	a.takeLocked(first, arrival)
	for n := 1; n < burstMsgs; n++ {
		var msg *nats.Msg
		select {
		case msg = <-in:
		default:
		}
		if msg == nil {
			break
		}
		a.takeLocked(msg, arrival)
	}
	if len(in) > 0 || (a.cfg.Linger > 0 && a.events > 0 && arrival-a.firstNs < int64(a.cfg.Linger)) {
		// More to come at once, or the batch is young: let it fill (a
		// full one goes out from emit, and the tick bounds the wait).
		return
	}
	if err := a.publishLocked(false); err != nil && a.pubErr == nil {
		a.pubErr = err
	}
}

// onMsg takes one fragment batch and publishes what it completed, as a
// subscription handler would; the benchmarks feed the service through it.
func (a *Assembler) onMsg(msg *nats.Msg) {
	a.mu.Lock()
	defer a.mu.Unlock()
	a.takeLocked(msg, time.Now().UnixNano())
	if err := a.publishLocked(false); err != nil && a.pubErr == nil {
		a.pubErr = err
	}
}

// takeLocked decodes one fragment batch that arrived at arrival (Unix ns)
// and hands its fragments to the builder. Called with a.mu held.
func (a *Assembler) takeLocked(msg *nats.Msg, arrival int64) {
	batch := &a.in
	if err := decodeBatch(msg.Data, batch, a.pool); err != nil {
		// The fast decoder agrees with proto.Unmarshal on what decodes;
		// ask proto for the reason only.
		var pbb pb.FragmentBatch
		if perr := proto.Unmarshal(msg.Data, &pbb); perr != nil {
			err = perr
		}
		a.undecoded++
		a.m.undecodable.Inc()
		a.logDiscard(fmt.Errorf("assembler: undecodable batch on %s: %v", msg.Subject, err))
		return
	}
	if i, ok := a.sourceIndex[batch.sourceID]; ok {
		if a.lastBatch != nil && a.repeatedLocked(batch) {
			// Taken already, from the catch-up or by the builder
			// before: not offered twice.
			batch.fail(a.pool)
			a.repeated++
			a.m.repeated.Inc()
			return
		}
		a.bytesIn[i] += uint64(len(msg.Data))
	}
	for _, h := range batch.frags {
		a.offerLocked(h, arrival, batch.sentUnixNs)
	}
	for range batch.undecodable {
		// A fragment that does not decode fails its integrity check:
		// the builder counts it malformed under the batch's source.
		_ = a.b.AddChecked(&pb.Fragment{SourceId: batch.sourceID, Run: a.cfg.Builder.Run}, false, arrival, batch.sentUnixNs)
		a.logDiscard(fmt.Errorf("assembler: a fragment in a batch of source %d on %s does not decode; counted malformed", batch.sourceID, msg.Subject))
	}
	batch.frags = batch.frags[:0]
	// Room appears only when crossings are emitted: retry then.
	if len(a.held) > 0 && a.emitted != a.heldTried {
		a.retryHeldLocked(arrival)
	}
	if len(a.held) >= a.heldLimit {
		a.evictForHeldLocked(arrival)
	}
	if batch.endOfRun && !a.ended[batch.sourceID] {
		if _, expected := a.sourceIndex[batch.sourceID]; !expected {
			// A marker from a source this run does not expect must not
			// end the run for the ones still sending.
			a.logDiscard(fmt.Errorf("assembler: end-of-run marker from source %d, which this run does not expect, ignored", batch.sourceID))
			return
		}
		a.ended[batch.sourceID] = true
		if len(a.ended) >= len(a.cfg.Builder.Sources) {
			close(a.done)
		}
	}
}

// heldOffer is a fragment the builder refused for want of room, and the
// send time of its batch.
type heldOffer struct {
	h    *heldFragment
	sent int64
}

// offerLocked hands h to the builder. A fragment refused for want of room
// (policy Block) waits in a.held to be offered again; any other refusal
// is counted by the builder, and h goes back to the pool. Called with
// a.mu held.
func (a *Assembler) offerLocked(h *heldFragment, arrival, sent int64) {
	err := a.add(h, arrival, sent)
	switch {
	case err == nil:
	case errors.Is(err, builder.ErrWindowFull):
		a.held = append(a.held, heldOffer{h, sent})
	default:
		a.pool.put(h)
		a.logDiscard(err)
	}
}

// retryHeldLocked offers the refused fragments again, oldest first, at
// arrival time now, keeping those refused again. All are offered: a
// fragment that completes a crossing already open goes in whatever the
// window, and the room it frees lets the older refused ones in on the next
// retry (after the next batch, or on the tick). Called with a.mu held.
func (a *Assembler) retryHeldLocked(now int64) {
	a.heldTried = a.emitted
	waiting := a.held
	a.held = a.held[:0]
	for _, o := range waiting {
		// offerLocked appends to a.held, which shares waiting's array
		// and never overtakes the read position.
		a.offerLocked(o.h, now, o.sent)
	}
	clear(waiting[len(a.held):])
}

// evictForHeldLocked runs when the refused fragments reach their limit:
// it offers them again oldest first, and makes room for each one refused
// as policy evict would (the oldest crossing goes out incomplete, flagged
// evicted), until half the limit is left. Block holds fragments back only
// so far: a service cannot hold back the readout on core NATS, and pausing
// the reading instead would leave every source silent to the builder, so
// all of them would be declared dead together. Called with a.mu held.
func (a *Assembler) evictForHeldLocked(now int64) {
	i := 0
	for len(a.held)-i > a.heldLimit/2 {
		o := a.held[i]
		err := a.add(o.h, now, o.sent)
		if errors.Is(err, builder.ErrWindowFull) {
			if !a.b.Evict() {
				break // nothing tracked, so nothing can be refused; defensive
			}
			continue
		}
		if err != nil {
			a.pool.put(o.h)
			a.logDiscard(err)
		}
		i++
	}
	n := copy(a.held, a.held[i:])
	clear(a.held[n:])
	a.held = a.held[:n]
}

// Held returns how many fragments refused for want of room (policy Block)
// wait to be offered again. It is safe for concurrent use.
func (a *Assembler) Held() int {
	a.mu.Lock()
	defer a.mu.Unlock()
	return len(a.held)
}

// add hands one decoded fragment to the builder, with the verdict of the
// checksum taken in decoding where there is one. Called with a.mu held.
func (a *Assembler) add(h *heldFragment, arrival, sent int64) error {
	if h.checked && !a.cfg.Builder.SkipChecksum {
		return a.b.AddChecked(&h.frag, h.intact, arrival, sent)
	}
	// A decoded payload, or checksums off: the builder decides.
	return a.b.Add(&h.frag, arrival, sent)
}

// logDiscard reports discarded fragments at most once a second, saying how
// many reports it suppressed in between.
func (a *Assembler) logDiscard(err error) {
	now := time.Now()
	if now.Sub(a.lastLog) < time.Second {
		a.suppress++
		return
	}
	a.log.Warn("fragment discarded", "instance", a.cfg.Instance, "error", err, "suppressed_since_last", a.suppress)
	a.lastLog, a.suppress = now, 0
}

// emit is the builder's callback: it appends the event to the outgoing
// batch, carrying each fragment as the bytes it arrived in, and returns the
// fragments' records to the pool. Called with a.mu held.
func (a *Assembler) emit(ev *builder.Event) {
	now := time.Now()
	e := &a.enc
	e.ev, e.lumi, e.builtNs = ev, uint32(ev.Orbit/a.cfg.LumiSliceOrbits)+1, now.UnixNano()
	e.raws, a.holders = e.raws[:0], a.holders[:0]
	for _, f := range ev.Fragments {
		h := a.pool.held(f)
		if h == nil {
			// Not decoded here (cannot happen through onMsg): encode it.
			raw, err := proto.Marshal(f)
			if err != nil && a.pubErr == nil {
				a.pubErr = fmt.Errorf("assembler: encode fragment: %w", err)
			}
			e.raws = append(e.raws, raw)
			continue
		}
		e.raws = append(e.raws, h.raw)
		a.holders = append(a.holders, h)
	}
	a.out = e.appendTo(a.out)
	for _, h := range a.holders {
		a.pool.put(h)
	}
	e.ev, e.raws = nil, e.raws[:0]
	lat := time.Duration(e.builtNs - ev.FirstArrivalNs)
	a.Latency.Record(lat)
	a.m.latency.Observe(lat.Seconds())
	if ev.EarliestSentNs > 0 {
		a.m.sinceSent.Observe(time.Duration(e.builtNs - ev.EarliestSentNs).Seconds())
	}
	if a.events == 0 {
		a.firstNs = e.builtNs
	}
	a.events++
	a.emitted++
	if a.events >= a.cfg.BatchEvents || len(a.out)-batchHeadRoom >= maxBatchBytes {
		if err := a.publishLocked(false); err != nil && a.pubErr == nil {
			a.pubErr = err
		}
	}
}

// publishLocked publishes the events gathered so far, or with end the
// end-of-run batch, which also goes to the end subject every selection
// worker receives. Called with a.mu held.
func (a *Assembler) publishLocked(end bool) error {
	if a.events == 0 && !end {
		return nil
	}
	a.head = batchHead(a.head[:0], uint32(a.cfg.Instance), a.seq)
	start := batchHeadRoom - len(a.head)
	copy(a.out[start:], a.head)
	total := uint64(0)
	if end {
		total = a.emitted
	}
	a.out = appendBatchTail(a.out, end, total)
	data := a.out[start:]
	if err := a.nc.Publish(a.cfg.Subjects.Built(), data); err != nil {
		return fmt.Errorf("assembler: publish events: %w", err)
	}
	if end {
		if err := a.nc.Publish(a.cfg.Subjects.BuiltEnd(), data); err != nil {
			return fmt.Errorf("assembler: publish end of run: %w", err)
		}
	}
	a.seq++
	a.m.batches.Inc()
	a.out = a.out[:batchHeadRoom]
	a.events = 0
	return nil
}

func (a *Assembler) noteDrops(sub *nats.Subscription) {
	if n, err := sub.Dropped(); err == nil && uint64(n) > a.dropped.Load() {
		a.m.dropped.Add(float64(uint64(n) - a.dropped.Load()))
		a.dropped.Store(uint64(n))
	}
}

// Stats returns a snapshot of the builder's accounting.
func (a *Assembler) Stats() builder.Stats {
	a.mu.Lock()
	defer a.mu.Unlock()
	return a.b.Stats()
}

// Emitted returns the number of events published so far.
func (a *Assembler) Emitted() uint64 {
	a.mu.Lock()
	defer a.mu.Unlock()
	return a.emitted
}

// DroppedMessages returns how many fragment batches NATS dropped because
// this subscriber fell behind. Their fragments never reached the builder.
func (a *Assembler) DroppedMessages() uint64 { return a.dropped.Load() }

// UndecodableMessages returns how many batches could not be decoded.
func (a *Assembler) UndecodableMessages() uint64 {
	a.mu.Lock()
	defer a.mu.Unlock()
	return a.undecoded
}

// SourceState is one expected source's accounting.
type SourceState struct {
	ID uint32
	builder.SourceStats
}

// SourceStates returns every expected source's accounting, in the order of
// the configuration.
func (a *Assembler) SourceStates() []SourceState {
	a.mu.Lock()
	defer a.mu.Unlock()
	out := make([]SourceState, 0, len(a.cfg.Builder.Sources))
	for _, id := range a.cfg.Builder.Sources {
		if ss, ok := a.b.SourceStats(id); ok {
			out = append(out, SourceState{ID: id, SourceStats: ss})
		}
	}
	return out
}

// Sources returns the expected source ids.
func (a *Assembler) Sources() []uint32 { return append([]uint32(nil), a.cfg.Builder.Sources...) }
