package replay

import (
	"context"
	"errors"
	"fmt"
	"io"
	"runtime"
	"slices"
	"sync"

	"github.com/bunchsieve/bunchsieve/builder"
	"github.com/bunchsieve/bunchsieve/services/recording"
)

// A stream replays on Config.Workers lanes. Handing one crossing's data
// from goroutine to goroutine (reader, decoders, builder, workers) costs
// more than the work itself: on this project's two-core machine such a
// pipeline spent 32 µs of processor time per event where one goroutine
// doing everything spent 20, the difference going into moving cache
// lines between the processors. So each lane does everything for a share
// of the crossings and shares almost nothing:
//
//   - every lane reads the whole file with a reader of its own, in the
//     same jobs (reading is cheap next to decoding);
//   - a crossing belongs to one lane (laneOf its key); a lane decodes in
//     full, checksum included, only the fragments of its own crossings,
//     and of the others only the header fields the builder needs;
//   - every lane runs a builder of its own over every fragment, in file
//     order, so all lanes' builders see the same input and emit the same
//     events in the same order (the builder is deterministic); for that a
//     lane needs each fragment's checksum verdict, which the fragment's
//     owner sends it per job (a few hundred booleans), together with
//     which batches failed to decode;
//   - a lane fills the towers of its own events the moment its builder
//     emits them, while they are still in its processor's cache, and
//     drops the others; it computes the features and decides them too
//     when the calling goroutine is behind (handOver), else it leaves
//     them filled but undecided;
//   - the calling goroutine merges the lanes' events by their emission
//     number, decides those left to it and delivers them in order.
//
// The calling goroutine is the second stage of a two-stage pipeline: on
// the project's two-core machine one lane and the calling goroutine
// (the default there: Config.Workers one fewer than the processors)
// replayed a recorded mu = 60 stream at 17 - 19 µs of processor time per
// event where two lanes deciding everything themselves spent 24 - 25:
// every lane pays for reading the whole stream and building every event,
// and one hand-over of a few kilobytes of towers per event costs less.
//
// A crossing's key is its (orbit, bcid) counters, the builder's key by
// default; a builder keying fragments by timestamp can put fragments of
// other counters into an event, so in that mode every lane decodes every
// fragment in full. So the outputs do not depend on the number of lanes,
// and the builder's accounting is each lane's (checked to agree at the
// end; the merge also fails, rather than waits, when the lanes' events
// cannot be put in one order).

// laneOf returns the lane of the crossing with the given key: a
// multiplicative hash, so that filling schemes with a period of two or
// four bunch slots still spread evenly.
func laneOf(key uint64, lanes int) int {
	if lanes == 1 {
		return 0
	}
	return int((key * 0x9e3779b97f4a7c15 >> 32) % uint64(lanes))
}

// verdicts is what a lane tells the others about one job: per batch
// whether it failed to decode and where its fragments' verdicts start,
// per fragment whether its checksum matches (meaningful for the lane's
// own fragments only), and how the job ended, which every lane must have
// read alike. It is not changed once sent.
type verdicts struct {
	batches []jobBatch
	intact  []bool
	eof     bool   // the job was the last of an intact stream
	err     string // the damage that ended the job, or empty
}

// laneChunks is the number of chunks each lane has in flight: enough for
// a lane that runs ahead of another to go on deciding while the merge
// waits for the other's events (4 made lanes wait for free chunks for a
// sixth of a physics-menu replay), and for one lane to go on while the
// calling goroutine writes a batch of the ROOT tree's baskets (48
// against 16: 4 - 10% more events/s, one lane on two cores).
const laneChunks = 48

// lane replays its share of a stream; see above. It is used by one
// goroutine.
type lane struct {
	k, n   int
	p      *plan
	cancel context.CancelFunc // the run's
	// headersOnly lets the lane keep only the header of other lanes'
	// fragments: true when the builder keys fragments by their counters,
	// as laneOf does, so that every fragment of an event is its owner's.
	// By timestamp an event can hold fragments of other counters, and
	// every lane decodes everything.
	headersOnly bool
	// spare is set when there are more processors than lanes, one for
	// the deciding goroutine: else handing events over only adds work.
	spare   bool
	failed  error // an event held a fragment its lane had not decoded
	ctx     context.Context
	r       *recording.Reader
	size    int64
	pool    *fragmentPool
	cache   *slotCache
	fz      *fuser
	w       *worker
	b       *builder.Builder
	truth   truthStore
	arrival int64
	seq     uint64 // events emitted by the builder so far
	reading *readJob

	to, from []chan *verdicts // per other lane; nil at k
	results  chan<- *chunk
	free     chan *chunk
	cur      *chunk
	progress func(float64) // set on lane 0

	batches, undecodable       uint64
	truthRecords, truthMatched uint64
	inputErr                   string
}

// errLanesDisagree reports lanes that saw different input or built
// different events: a broken invariant of the lanes, or a stream file
// changed in place while it was replayed (appending to it is harmless:
// every lane reads it as long as it was when opened).
var errLanesDisagree = errors.New("replay: internal error: lanes disagree")

// laneAhead is the number of jobs a lane reads before it must build the
// oldest; the verdict channels hold twice as many. More jobs ahead keep
// more decoded towers waiting, out of cache: 4 cost more processor time
// than they saved in waiting.
const laneAhead = 3

// run replays the whole stream. A lane builds its oldest job once the
// other lanes' verdicts on it are in; until then, it reads on, up to
// laneAhead jobs, rather than wait.
func (l *lane) run() (err error) {
	defer func() {
		// A lane that fails stops the others first, so that they see the
		// cancellation rather than its channels closing.
		if err != nil {
			l.cancel()
		}
		for _, ch := range l.to {
			if ch != nil {
				close(ch)
			}
		}
	}()
	var free, pending []*readJob
	for range laneAhead {
		free = append(free, &readJob{others: make([]*verdicts, l.n)})
	}
	ended := false
	for {
		if err := l.ctx.Err(); err != nil {
			return err
		}
		if !ended && len(free) > 0 {
			j := free[len(free)-1]
			free = free[:len(free)-1]
			l.read(j)
			if err := l.send(j); err != nil {
				return err
			}
			pending = append(pending, j)
			ended = j.eof || j.err != nil
			if in, err := l.receive(pending[0], false); err != nil {
				return err
			} else if !in {
				continue
			}
		}
		if len(pending) == 0 {
			break
		}
		j := pending[0]
		if _, err := l.receive(j, true); err != nil {
			return err
		}
		if err := l.feed(j); err != nil {
			return err
		}
		if l.failed != nil {
			return l.failed
		}
		pending = pending[1:]
		free = append(free, j)
	}
	l.b.Flush()
	l.ship()
	return l.failed
}

// read fills j with the next batches of the stream, decoded (the lane's
// own fragments in full, with their checksum verdicts, the others' header
// fields only), and the truth records between them, up to the job bounds,
// the end or damage. A batch is decoded as soon as it is read: its bytes
// are valid only until the reader's next frame.
func (l *lane) read(j *readJob) {
	j.reset()
	l.reading = j
	for !j.full() {
		b, err := l.r.Next()
		if err != nil {
			if errors.Is(err, io.EOF) {
				j.eof = true
			} else {
				j.err = err
			}
			break
		}
		j.bytes += len(b.Data)
		first, start := len(j.frags), len(j.intact)
		j.frags, _, err = decodeBatchFunc(b.Data, l.cache, j.frags, func(data []byte, s *slot) error {
			owner, intact, err := l.decodeFragment(data, s)
			j.intact = append(j.intact, intact)
			j.owner = append(j.owner, int32(owner))
			return err
		})
		if err != nil {
			j.intact, j.owner = j.intact[:start], j.owner[:start]
		}
		j.batches = append(j.batches, jobBatch{first: first, n: len(j.frags) - first, bad: err != nil})
	}
	j.offset = l.r.Offset()
}

// decodeFragment decodes one Fragment message into s and returns the lane
// its crossing belongs to, and, for the lane's own fragments, whether its
// checksum matches. Of the other lanes' fragments in the canonical layout
// it keeps the header fields and the checksum only (canonicalFields reads
// what decodeFragment would), when the builder keys fragments by their
// counters, as the lanes do; anything else is decoded in full, by every
// lane alike.
func (l *lane) decodeFragment(data []byte, s *slot) (owner int, intact bool, err error) {
	var hdr [10]uint64
	payload, num, canonical := canonicalFields(data, &hdr)
	if canonical && l.n > 1 && l.headersOnly {
		if o := laneOf(crossingKey(hdr[3], uint32(hdr[4])), l.n); o != l.k {
			setHeader(&s.f, &hdr)
			s.fused, s.header, s.f.Payload = false, true, nil
			return o, false, nil
		}
	}
	if intact, err = l.fz.decodeFields(data, canonical, &hdr, payload, num, s); err != nil {
		return 0, false, err
	}
	return laneOf(crossingKey(s.f.Orbit, s.f.Bcid), l.n), intact, nil
}

// send gives the verdicts of j to every other lane.
func (l *lane) send(j *readJob) error {
	if l.n == 1 {
		return nil
	}
	v := &verdicts{batches: slices.Clone(j.batches), intact: slices.Clone(j.intact), eof: j.eof, err: errText(j.err)}
	for _, ch := range l.to {
		if ch == nil {
			continue
		}
		// The channels hold 2*laneAhead verdicts, and a lane cannot get
		// further ahead of another than that (it reads job i only once it
		// has built job i-laneAhead, with the other's verdicts on it), so
		// this does not wait.
		select {
		case ch <- v:
		case <-l.ctx.Done():
			return l.ctx.Err()
		}
	}
	return nil
}

func errText(err error) string {
	if err == nil {
		return ""
	}
	return err.Error()
}

// receive collects into j.others the other lanes' verdicts on j, the
// oldest job the lane has not built: each lane's arrive in job order.
// Without wait it takes only what has arrived and reports whether all
// has; with wait it waits for the rest.
func (l *lane) receive(j *readJob, wait bool) (bool, error) {
	for o, ch := range l.from {
		if ch == nil || j.others[o] != nil {
			continue
		}
		var v *verdicts
		var ok bool
		select {
		case v, ok = <-ch:
		default:
			if !wait {
				return false, nil
			}
			l.ship() // as in send
			select {
			case v, ok = <-ch:
			case <-l.ctx.Done():
				return false, l.ctx.Err()
			}
		}
		if !ok {
			// Another lane stopped early: cancelled, or its reader saw
			// another file. The first is reported by whoever cancelled.
			if err := l.ctx.Err(); err != nil {
				return false, err
			}
			return false, fmt.Errorf("%w: a lane stopped reading early", errLanesDisagree)
		}
		j.others[o] = v
	}
	return true, nil
}

// feed hands the fragments of j to the builder in file order, each with
// its owner's checksum verdict, and the truth records in their place.
func (l *lane) feed(j *readJob) error {
	others := j.others
	for o, v := range others {
		if v != nil && (len(v.batches) != len(j.batches) || v.eof != j.eof || v.err != errText(j.err)) {
			return fmt.Errorf("%w: lanes %d and %d read the stream differently", errLanesDisagree, l.k, o)
		}
	}
	t := 0
	for i := range j.batches {
		for ; t < j.ntruth && j.truthAt[t] <= i; t++ {
			l.addTruth(&j.truth[t])
		}
		b := &j.batches[i]
		l.batches++
		bad := b.bad
		for _, v := range others {
			if v != nil && v.batches[i].bad {
				bad = true
			}
		}
		if bad {
			// A batch some lane could not decode is undecodable for all,
			// as it is for a single reader.
			l.undecodable++
			for _, f := range j.frags[b.first : b.first+b.n] {
				l.pool.put(f)
			}
			continue
		}
		for o, v := range others {
			if v != nil && v.batches[i].n != b.n {
				return fmt.Errorf("%w: lanes %d and %d read %d and %d fragments in a batch", errLanesDisagree, l.k, o, b.n, v.batches[i].n)
			}
		}
		for k := range b.n {
			x := b.first + k
			intact := j.intact[x]
			if o := int(j.owner[x]); o != l.k {
				v := others[o]
				intact = v.intact[v.batches[i].first+k]
			}
			f := j.frags[x]
			if f.TimestampNs > l.arrival {
				l.arrival = f.TimestampNs
			}
			// Arrival time is the largest fragment time so far, as for
			// every replay: dead-source detection runs in event time.
			if err := l.b.AddChecked(f, intact, l.arrival, l.arrival); err != nil {
				l.pool.put(f)
			}
		}
	}
	for ; t < j.ntruth; t++ {
		l.addTruth(&j.truth[t])
	}
	if l.progress != nil && l.size > 0 {
		l.progress(float64(j.offset) / float64(l.size))
	}
	if j.err != nil {
		// Damage: what came before has been delivered; the report covers
		// it and says where reading stopped.
		l.inputErr = j.err.Error()
	}
	return nil
}

// addTruth keeps a copy of a truth record of one of the lane's crossings
// until its event is emitted; every lane counts every record.
func (l *lane) addTruth(rec *recording.TruthRecord) {
	l.truthRecords++
	key := crossingKey(rec.Orbit, rec.Bcid)
	if laneOf(key, l.n) != l.k {
		return
	}
	l.truth.keep(key, rec)
}

// emit is the builder's callback: an event of the lane's own is decided
// at once, into the current chunk; the others' fragments go back to the
// pool.
func (l *lane) emit(be *builder.Event) {
	seq := l.seq
	l.seq++
	key := crossingKey(be.Orbit, be.Bcid)
	if laneOf(key, l.n) != l.k {
		l.pool.putAll(be.Fragments)
		return
	}
	if l.cur == nil {
		if l.cur = l.takeChunk(); l.cur == nil {
			l.pool.putAll(be.Fragments)
			return
		}
	}
	c := l.cur
	i := c.n
	e := &c.events[i]
	e.seq, e.orbit, e.bcid, e.flags, e.missing = seq, be.Orbit, be.Bcid, be.Flags, len(be.Missing)
	e.lumi = uint32(be.Orbit/l.p.lumiOrbits) + 1
	e.slots = l.pool.slotsOf(e.slots[:0], be.Fragments)
	for _, sl := range e.slots {
		if sl.header && l.failed == nil {
			l.failed = fmt.Errorf("%w: an event of lane %d holds a fragment it read the header of only", errLanesDisagree, l.k)
		}
	}
	if e.truth = l.truth.take(key); e.truth != nil {
		l.truthMatched++
	}
	if l.handOver() {
		e.decided = false
		l.w.fill(e, &e.ev)
	} else {
		l.w.event(c, i)
	}
	l.pool.putSlots(e.slots)
	e.slots = e.slots[:0]
	c.n++
	if c.n == len(c.events) {
		l.ship()
	}
}

// handOver reports whether the lane leaves the event it is building to
// the deciding goroutine, filled but undecided: while that goroutine has
// a processor the lanes do not use and fewer than handOverBelow of the
// lane's chunks waiting.
func (l *lane) handOver() bool {
	switch l.p.cfg.handOver {
	case handOverNone:
		return false
	case handOverAll:
		return true
	}
	return l.spare && laneChunks-len(l.free)-1 < handOverBelow
}

// handOverBelow is the number of a lane's chunks the deciding goroutine
// may have waiting before the lane decides its events itself again. A
// lane that leaves every event to it outran it: the lane waited for
// free chunks while the deciding goroutine, which reads every tower the
// lane wrote from the other processor's cache, fell behind; a lane
// deciding everything itself left the second processor idle but for the
// report. With one lane on two cores and 48 chunks, 16 gave about 4% more
// events/s than 4 with the starter menu and the same with the physics
// menu (interleaved runs); 32 ran as 16.
const handOverBelow = 16

// takeChunk returns a free chunk with the truth records of its previous
// use back in the lane's spares, or nil once the run is cancelled. It
// waits only when every chunk of the lane is with the merge, and so has
// nothing of its own to ship first.
func (l *lane) takeChunk() *chunk {
	select {
	case c := <-l.free:
		for i := range c.events[:c.n] {
			e := &c.events[i]
			if e.truth != nil {
				l.truth.recycle(e.truth)
				e.truth = nil
			}
		}
		c.n = 0
		return c
	case <-l.ctx.Done():
		return nil
	}
}

// ship sends the current chunk, if it holds events, to the merge. The
// results channel has room for every chunk there is, so it never waits.
func (l *lane) ship() {
	if c := l.cur; c != nil && c.n > 0 {
		l.cur = nil
		c.upTo = l.seq
		l.results <- c
	}
}

// runLanes replays a stream on Config.Workers lanes and delivers their
// events in emission order from the calling goroutine.
func (p *plan) runLanes(ctx context.Context, s *StreamSource, sink func(*Event) error) (Summary, error) {
	sum := p.summary()
	n := p.cfg.Workers
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()

	results := make(chan *chunk, n*laneChunks)
	lanes := make([]*lane, n)
	var frac float64
	var fracMu sync.Mutex
	for k := range lanes {
		r := s.r
		if k > 0 {
			// A clone reads the same bytes, the file as long as it was
			// when the stream was opened, through the same open file.
			var err error
			if r, err = s.r.Clone(); err != nil {
				return sum, fmt.Errorf("replay: %w", err)
			}
		}
		w, err := p.newWorker()
		if err != nil {
			return sum, err
		}
		pool := newFragmentPool()
		l := &lane{k: k, n: n, p: p, ctx: ctx, spare: runtime.GOMAXPROCS(0) > n, cancel: cancel, r: r, headersOnly: p.bc.Mode == builder.ByCounter, size: s.size, pool: pool, cache: pool.cache(),
			fz: newFuser(p.table), w: w,
			to: make([]chan *verdicts, n), from: make([]chan *verdicts, n),
			results: results, free: make(chan *chunk, laneChunks)}
		if l.b, err = builder.New(p.bc, l.emit); err != nil {
			return sum, fmt.Errorf("replay: %w", err)
		}
		for range laneChunks {
			c := p.newChunk()
			c.lane = k
			l.free <- c
		}
		if s.sample.Truth {
			r.OnTruth(func(rec *recording.TruthRecord) { l.reading.addTruth(rec) })
		}
		lanes[k] = l
	}
	lanes[0].progress = func(f float64) {
		fracMu.Lock()
		frac = f
		fracMu.Unlock()
	}
	// Verdict channels hold as many jobs as one lane can be ahead of
	// another (see send).
	for i := range lanes {
		for j := range lanes {
			if i != j {
				ch := make(chan *verdicts, 2*laneAhead)
				lanes[i].to[j], lanes[j].from[i] = ch, ch
			}
		}
	}

	errs := make([]error, n)
	var wg sync.WaitGroup
	for k, l := range lanes {
		wg.Go(func() { errs[k] = l.run() })
	}
	go func() {
		wg.Wait()
		close(results)
	}()

	// The merge: each lane's chunks arrive in its emission order; the
	// next event is always at the head of one lane's queue.
	dw, err := p.newWorker()
	if err != nil {
		return sum, err
	}
	d := p.newDelivery(sink, dw)
	queues := make([][]*chunk, n)
	pos := make([]int, n)
	var sinkErr error
	// Every event is one lane's, and a lane's chunks come in the order it
	// built them, stamped with the number of events it had built: an
	// event at the head of two lanes, or one that no lane has although
	// every lane has built past it, means the lanes' builders disagree.
	var mergeErr error
	stamps := make([]uint64, n)
	fail := func(err error) bool {
		mergeErr = err
		cancel()
		return false
	}
	next := func() bool {
		for k, q := range queues {
			if len(q) == 0 || q[0].events[pos[k]].seq != d.decided {
				continue
			}
			for o, qo := range queues {
				if o != k && len(qo) > 0 && qo[0].events[pos[o]].seq == d.decided {
					return fail(fmt.Errorf("%w: lanes %d and %d both have event %d", errLanesDisagree, k, o, d.decided))
				}
			}
			c := q[0]
			if err := d.event(c, pos[k]); err != nil {
				sinkErr = err
				cancel()
				return false
			}
			if pos[k]++; pos[k] == c.n {
				queues[k], pos[k] = q[1:], 0
				lanes[k].free <- c
				if p.cfg.Progress != nil {
					fracMu.Lock()
					f := frac
					fracMu.Unlock()
					p.cfg.Progress(d.decided, f)
				}
			}
			return true
		}
		return false
	}
	for c := range results {
		if sinkErr != nil || mergeErr != nil {
			continue
		}
		queues[c.lane] = append(queues[c.lane], c)
		stamps[c.lane] = c.upTo
		for next() {
		}
		// Once the run is cancelled, lanes drop the events they build
		// (takeChunk), so their stamps run past events nobody ships.
		if mergeErr == nil && sinkErr == nil && ctx.Err() == nil && slices.Min(stamps) > d.decided {
			fail(fmt.Errorf("%w: no lane has event %d", errLanesDisagree, d.decided))
		}
	}

	l0 := lanes[0]
	sum.Events = d.decided
	sum.Builder = l0.b.Stats()
	sum.Batches, sum.Undecodable = l0.batches, l0.undecodable
	sum.TruthRecords = l0.truthRecords
	for _, l := range lanes {
		sum.TruthMatched += l.truthMatched
	}
	sum.InputError = l0.inputErr
	switch {
	case sinkErr != nil:
		return sum, sinkErr
	case mergeErr != nil:
		return sum, mergeErr
	}
	for _, err := range errs {
		if err != nil && !errors.Is(err, context.Canceled) {
			return sum, err
		}
	}
	if err := ctx.Err(); err != nil {
		return sum, err
	}
	for k, l := range lanes {
		switch {
		case len(queues[k]) > 0:
			return sum, fmt.Errorf("%w: lane %d has events the others never reached", errLanesDisagree, k)
		case l.seq != d.decided:
			return sum, fmt.Errorf("%w: lane %d built %d events, %d were delivered", errLanesDisagree, k, l.seq, d.decided)
		case l.b.Stats() != sum.Builder:
			return sum, fmt.Errorf("%w: the builders of lanes 0 and %d differ in their accounting", errLanesDisagree, k)
		case l.batches != l0.batches || l.undecodable != l0.undecodable || l.inputErr != l0.inputErr:
			return sum, fmt.Errorf("%w: lanes 0 and %d read the stream differently", errLanesDisagree, k)
		}
	}
	return sum, nil
}
