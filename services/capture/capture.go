// Package capture records the readout's fragment batches durably in a
// JetStream stream on the NATS deployment itself, and writes what was
// stored into a stream file (docs/stream-format.md) for replay.
//
// A core NATS subscriber that writes a file loses batches whenever it
// falls behind or is disconnected; a JetStream stream is filled by the
// server as the batches pass, whatever the recorder does, and keeps them
// through a server restart (file storage). Saving reads the stream from
// its first message at its own pace, so it can run during the run, after
// it, or again after a failed attempt.
package capture

import (
	"context"
	"errors"
	"fmt"
	"slices"
	"sort"
	"strings"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"
	"google.golang.org/protobuf/proto"

	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/transport"
)

// DefaultMaxBytes caps a stream's stored bytes when the caller sets no
// limit: about 45 minutes of the default readout (16 sources at 5,000
// crossings/s store about 630 B per crossing, 3.2 MB/s), and within the
// store of the deployment's servers (deploy/nats: max_file_store 20GB).
const DefaultMaxBytes = 8 << 30

// DefaultName returns the stream name for subjects s: the prefix with its
// dots (not allowed in stream names) made underscores, then "_fragments".
func DefaultName(s transport.Subjects) string {
	p := s.Prefix
	if p == "" {
		p = transport.DefaultPrefix
	}
	return strings.ReplaceAll(p, ".", "_") + "_fragments"
}

// Options say which stream to open.
type Options struct {
	// Name is the stream's name; empty means DefaultName(Subjects).
	Name string
	// Subjects are the deployment's; the zero value has the default
	// prefix.
	Subjects transport.Subjects
	// MaxBytes caps the stored bytes; zero means DefaultMaxBytes, or the
	// largest power-of-two share of it that the server's store can
	// reserve (a server with a small store, such as serve's). A full
	// stream refuses new batches rather than dropping its oldest, so a
	// recording that overflowed shows as missing batches at its end
	// instead of silently losing its start.
	MaxBytes int64
	// Replicas is the number of servers of a cluster holding the stream;
	// zero means 1 (a single server).
	Replicas int
}

func (o Options) name() string {
	if o.Name != "" {
		return o.Name
	}
	return DefaultName(o.Subjects)
}

// Open creates the stream that stores every fragment batch published
// under o.Subjects, or finds it if it exists with the same subjects. It
// reports whether it created the stream. It is safe for concurrent use
// (the server decides between two callers creating one stream).
func Open(ctx context.Context, js jetstream.JetStream, o Options) (jetstream.Stream, bool, error) {
	name := o.name()
	want := o.Subjects.AllFragments()
	st, err := js.Stream(ctx, name)
	if err == nil {
		info := st.CachedInfo()
		if len(info.Config.Subjects) != 1 || info.Config.Subjects[0] != want {
			return nil, false, fmt.Errorf("capture: stream %s exists and stores %v, not %s; remove it or choose another --name", name, info.Config.Subjects, want)
		}
		return st, false, nil
	}
	if !errors.Is(err, jetstream.ErrStreamNotFound) {
		return nil, false, describe(name, err)
	}
	maxBytes := o.MaxBytes
	if maxBytes == 0 {
		maxBytes = DefaultMaxBytes
	}
	var tried []int64
	busy := 0
	for {
		st, err = js.CreateStream(ctx, jetstream.StreamConfig{
			Name:        name,
			Description: "bunchsieve fragment batches of " + want,
			Subjects:    []string{want},
			Retention:   jetstream.LimitsPolicy,
			MaxBytes:    maxBytes,
			Discard:     jetstream.DiscardNew,
			Storage:     jetstream.FileStorage,
			Replicas:    max(o.Replicas, 1),
		})
		// Without a limit of the caller's, one the server's store can
		// reserve is taken: halving down to minDefaultBytes.
		if o.MaxBytes == 0 && insufficient(err) && maxBytes/2 >= minDefaultBytes {
			tried = append(tried, maxBytes)
			maxBytes /= 2
			continue
		}
		if errors.Is(err, jetstream.ErrStreamNameAlreadyInUse) && len(tried) > 0 && busy < 50 {
			// A cluster refusing an attempt may still hold the name for a
			// moment, or create the stream after all: one of ours if it
			// has our subjects and one of the limits tried. Otherwise the
			// same limit is tried again shortly.
			if st, ours := existing(ctx, js, name, want, tried); ours {
				return st, true, nil
			}
			busy++
			select {
			case <-ctx.Done():
				return nil, false, describe(name, ctx.Err())
			case <-time.After(50 * time.Millisecond):
			}
			continue
		}
		if err != nil {
			return nil, false, describe(name, err)
		}
		return st, true, nil
	}
}

// existing returns the stream name if it stores want with one of the
// limits in sizes.
func existing(ctx context.Context, js jetstream.JetStream, name, want string, sizes []int64) (jetstream.Stream, bool) {
	st, err := js.Stream(ctx, name)
	if err != nil {
		return nil, false
	}
	c := st.CachedInfo().Config
	return st, len(c.Subjects) == 1 && c.Subjects[0] == want && slices.Contains(sizes, c.MaxBytes)
}

// minDefaultBytes is the smallest limit Open tries when the caller set
// none and the server's store cannot reserve DefaultMaxBytes.
const minDefaultBytes = 64 << 20

// insufficient says err is the server's refusal of a stream's size
// limit: a single server reports the lack of storage as such, a cluster
// as insufficient resources or as no peer for placement with too little
// storage.
func insufficient(err error) bool {
	var apiErr *jetstream.APIError
	if !errors.As(err, &apiErr) {
		return false
	}
	switch apiErr.ErrorCode {
	case errInsufficientStorage, errInsufficientResources:
		return true
	case errNoPeers:
		return strings.Contains(apiErr.Description, "insufficient storage")
	}
	return false
}

// Remove deletes the stream name and everything it stored. It is safe
// for concurrent use.
func Remove(ctx context.Context, js jetstream.JetStream, name string) error {
	if err := js.DeleteStream(ctx, name); err != nil {
		return describe(name, err)
	}
	return nil
}

// JetStream API error codes for a stream whose size limit the servers
// cannot reserve, as nats-server numbers them.
const (
	errNoPeers               jetstream.ErrorCode = 10005
	errInsufficientResources jetstream.ErrorCode = 10023
	errInsufficientStorage   jetstream.ErrorCode = 10047
)

func describe(name string, err error) error {
	if insufficient(err) {
		return fmt.Errorf("capture: stream %s: the server cannot reserve the stream's size limit in its store; give a smaller limit (--max-mib) or raise the server's max_file_store: %w", name, err)
	}
	if errors.Is(err, jetstream.ErrJetStreamNotEnabled) || errors.Is(err, jetstream.ErrJetStreamNotEnabledForAccount) || errors.Is(err, nats.ErrNoResponders) {
		return fmt.Errorf("capture: stream %s: the NATS server has JetStream off (start it with JetStream enabled, e.g. a jetstream block with a store_dir): %w", name, err)
	}
	if errors.Is(err, jetstream.ErrStreamNotFound) {
		return fmt.Errorf("capture: no stream %s on this NATS deployment (open it before the run with bunchsieve capture open): %w", name, err)
	}
	return fmt.Errorf("capture: stream %s: %w", name, err)
}

// Writer takes the batches Save reads; *recording.Writer is one.
type Writer interface {
	WriteBatch(source uint32, partition int, firstTimestampNs int64, data []byte, fragments int) error
	AddCrossings(n uint64)
}

// SaveOptions say what Save reads and when it stops.
type SaveOptions struct {
	// Name is the stream's name; empty means DefaultName(Subjects).
	Name     string
	Subjects transport.Subjects
	// Run selects the run to save; zero takes the run of the first stored
	// batch. Batches of other runs are skipped and counted.
	Run uint32
	// Sources and Partitions are what the readout sends: every source to
	// every one of Partitions builder shares. Save is complete when each
	// pair has sent its end-of-run batch and no batch is missing.
	Sources    []uint32
	Partitions int
	// Idle is how long Save waits for a new batch before it stops without
	// every end-of-run batch; zero means 5 s.
	Idle time.Duration
	// Create is called once, with the run's number, before the run's
	// first batch is written, and returns where the batches go (the run
	// is known only then when Run is zero). Without a batch of the run
	// it is never called.
	Create func(run uint32) (Writer, error)
}

// Gap is a run of batch sequence numbers of one source and builder share
// that the stream does not hold.
type Gap struct {
	Partition int
	Source    uint32
	// From and To are the first and last missing sequence numbers.
	From, To uint64
}

func (g Gap) String() string {
	if g.From == g.To {
		return fmt.Sprintf("source %d share %d batch %d", g.Source, g.Partition, g.From)
	}
	return fmt.Sprintf("source %d share %d batches %d-%d", g.Source, g.Partition, g.From, g.To)
}

// Result is what Save read and wrote.
type Result struct {
	Stream string
	Run    uint32
	// Batches, Fragments and Crossings were written (crossings counted
	// once however many sources sent fragments of them).
	Batches, Fragments, Crossings uint64
	// Ended counts the (source, share) pairs whose end-of-run batch was
	// read, of Expected.
	Ended, Expected int
	// NotEnded lists the pairs that sent no end-of-run batch, as
	// "source S share P".
	NotEnded []string
	// Gaps are missing batches: sequence numbers skipped before a later
	// batch of the same pair arrived.
	Gaps []Gap
	// Duplicates are batches stored twice (same pair and sequence, sent
	// no later than the pair's latest batch); they are written, as the
	// builder counts their fragments as duplicates.
	Duplicates uint64
	// AfterEnd are batches of a second run stored under the same run
	// number (a readout or run control restarted, after a clean end or a
	// crash): batches of a pair that had ended, or sent after the pair's
	// latest with a sequence number read already, and everything of the
	// pair after them. They are not written; the file holds the first run.
	AfterEnd uint64
	// Unexpected are batches of a source or share the readout was not
	// said to have (a configuration other than the readout's); written,
	// as the builder counts them.
	Unexpected uint64
	// OtherRuns counts skipped batches by run number.
	OtherRuns map[uint32]uint64
	// Undecodable counts stored messages that are not fragment batches
	// or are not on a fragment subject; they are not written.
	Undecodable uint64
	// Idle says Save stopped because nothing new arrived for Idle.
	Idle bool
	// Full says the stream had reached its size limit, so the server
	// refused the batches that came after (StoredBytes of MaxBytes);
	// Problems gives it as the likely cause of what is missing.
	Full                  bool
	StoredBytes, MaxBytes int64
}

// Complete says every expected pair ended with no batch missing, and
// nothing was stored that does not belong to the run as configured.
func (r Result) Complete() bool {
	return r.Ended == r.Expected && len(r.Gaps) == 0 && r.Undecodable == 0 && r.AfterEnd == 0 && r.Unexpected == 0
}

// Problems describes what makes the result incomplete, one item per kind.
func (r Result) Problems() []string {
	var out []string
	if n := len(r.NotEnded); n > 0 {
		out = append(out, fmt.Sprintf("%d of %d source/share pairs sent no end-of-run batch (%s)", n, r.Expected, clip(r.NotEnded)))
	}
	if n := len(r.Gaps); n > 0 {
		var missing uint64
		names := make([]string, n)
		for i, g := range r.Gaps {
			missing += g.To - g.From + 1
			names[i] = g.String()
		}
		out = append(out, fmt.Sprintf("%d batches missing (%s)", missing, clip(names)))
	}
	if r.Undecodable > 0 {
		out = append(out, fmt.Sprintf("%d stored messages were not fragment batches", r.Undecodable))
	}
	if r.AfterEnd > 0 {
		out = append(out, fmt.Sprintf("%d batches belong to a second run numbered %d, stored after the first (sent after a source's end-of-run batch, or again from an earlier batch by a restarted readout); the file holds the first run, save the other from a stream of its own", r.AfterEnd, r.Run))
	}
	if r.Unexpected > 0 {
		out = append(out, fmt.Sprintf("%d batches of sources or builder shares the configuration does not have (give --config, --sources and --builders as the readout had them)", r.Unexpected))
	}
	if r.Full && len(out) > 0 {
		out = append(out, fmt.Sprintf("the stream is full (%.1f of %.1f MiB), so the server refused what came after", float64(r.StoredBytes)/(1<<20), float64(r.MaxBytes)/(1<<20)))
	}
	return out
}

func clip(items []string) string {
	const show = 4
	if len(items) <= show {
		return strings.Join(items, ", ")
	}
	return strings.Join(items[:show], ", ") + fmt.Sprintf(", and %d more", len(items)-show)
}

// pair is a (share, source) key.
type pair struct {
	partition int
	source    uint32
}

// pairState is what Save knows of one pair.
type pairState struct {
	next  uint64 // the sequence number expected next
	ended bool
	// lastSent is the latest publish time of the pair's batches, which
	// tells a batch stored twice from a restarted readout's.
	lastSent int64
	// second is set once batches of a second run under the same number
	// arrive: everything of the pair after that is left out.
	second bool
	// first is the first timestamp of the pair's last batch with
	// fragments, which a batch without fragments (an end-of-run batch)
	// is filed under, as the readout writes it into a file.
	first int64
}

// fetchBatch is how many messages one fetch asks for.
const fetchBatch = 512

// Save reads the stream from its first message and writes the batches of
// one run to the writer o.Create returns, in the order the server stored
// them, byte for byte. It stops when every expected pair has ended and
// nothing more is stored, or when nothing new arrives for o.Idle, or when
// ctx ends (returning ctx's error with what was written so far). The
// result says whether the recording is complete; an incomplete one is not
// an error, the caller decides. Saves of one stream may run at once, each
// reading through a consumer of its own.
func Save(ctx context.Context, js jetstream.JetStream, o SaveOptions) (Result, error) {
	name := o.Name
	if name == "" {
		name = DefaultName(o.Subjects)
	}
	res := Result{Stream: name, Run: o.Run, OtherRuns: map[uint32]uint64{}}
	if o.Create == nil {
		return res, fmt.Errorf("capture: save %s: no writer to create", name)
	}
	if len(o.Sources) == 0 || o.Partitions < 1 {
		return res, fmt.Errorf("capture: save %s: want the readout's sources and at least one builder share", name)
	}
	idle := o.Idle
	if idle <= 0 {
		idle = 5 * time.Second
	}
	pairs := map[pair]*pairState{}
	for p := 0; p < o.Partitions; p++ {
		for _, s := range o.Sources {
			pairs[pair{p, s}] = &pairState{}
		}
	}
	res.Expected = len(pairs)

	stream, err := js.Stream(ctx, name)
	if err != nil {
		return res, describe(name, err)
	}
	info := stream.CachedInfo()
	if want := o.Subjects.AllFragments(); len(info.Config.Subjects) != 1 || info.Config.Subjects[0] != want {
		return res, fmt.Errorf("capture: stream %s stores %v, not the batches of this subject prefix (%s)", name, info.Config.Subjects, want)
	}
	sv := &saver{res: &res, subjects: o.Subjects, pairs: pairs, crossings: map[uint64]struct{}{}, create: o.Create, chosen: o.Run != 0}
	rd := &reader{js: js, stream: name, next: 1}
	defer rd.close()
	last := time.Now()
	pending := uint64(1) // unknown until the first message
	for {
		if ctx.Err() != nil {
			sv.finish()
			return res, ctx.Err()
		}
		if res.Ended == res.Expected && pending == 0 {
			break
		}
		if time.Since(last) >= idle {
			res.Idle = res.Ended < res.Expected
			break
		}
		got, err := rd.fetch(ctx, fetchWait(idle), func(m jetstream.Msg, md *jetstream.MsgMetadata) error {
			pending = md.NumPending
			return sv.take(m.Subject(), m.Data())
		})
		if err != nil {
			sv.finish()
			return res, err
		}
		if got > 0 {
			last = time.Now()
		} else {
			pending = 0
		}
	}
	sv.finish()
	sv.full(ctx, stream)
	return res, nil
}

// reader reads a stream in order from sequence next on, through a
// consumer of its own that it makes again whenever one fails (a server
// restarting, a consumer lost), so that a save carries on where it was;
// a stream that is gone ends it.
type reader struct {
	js     jetstream.JetStream
	stream string
	// next is the next sequence number to read; zero means the first
	// message stored at or after since.
	next  uint64
	since time.Time
	// filter, if not empty, limits the reading to subjects matching it.
	filter string
	cons   jetstream.Consumer
}

// readerInactive is how long the server keeps a reader's consumer after
// the reader stopped using it.
const readerInactive = 30 * time.Second

// fetch hands the messages that arrive within wait to take, in stream
// order, and returns how many there were. A transport failure is not an
// error: the next fetch starts over from the next sequence number, and
// the caller's idle limit bounds how long that goes on.
func (r *reader) fetch(ctx context.Context, wait time.Duration, take func(jetstream.Msg, *jetstream.MsgMetadata) error) (int, error) {
	if r.cons == nil {
		cctx, cancel := context.WithTimeout(ctx, 5*time.Second)
		cc := jetstream.ConsumerConfig{
			DeliverPolicy: jetstream.DeliverByStartSequencePolicy, OptStartSeq: r.next, FilterSubject: r.filter,
			AckPolicy: jetstream.AckNonePolicy, InactiveThreshold: readerInactive, MemoryStorage: true,
		}
		if r.next == 0 {
			since := r.since
			cc.DeliverPolicy, cc.OptStartSeq, cc.OptStartTime = jetstream.DeliverByStartTimePolicy, 0, &since
		}
		cons, err := r.js.CreateConsumer(cctx, r.stream, cc)
		cancel()
		if err != nil {
			return 0, r.failed(ctx, wait)
		}
		r.cons = cons
	}
	batch, err := r.cons.Fetch(fetchBatch, jetstream.FetchMaxWait(wait))
	if err != nil {
		r.close()
		return 0, r.failed(ctx, wait)
	}
	got := 0
	for m := range batch.Messages() {
		md, err := m.Metadata()
		if err != nil {
			continue
		}
		if md.Sequence.Stream < r.next {
			continue // delivered again after a failure
		}
		r.next = md.Sequence.Stream + 1
		got++
		if err := take(m, md); err != nil {
			return got, err
		}
	}
	if err := batch.Error(); err != nil && !errors.Is(err, nats.ErrTimeout) && !errors.Is(err, context.DeadlineExceeded) && !errors.Is(err, jetstream.ErrNoMessages) {
		r.close()
		if got == 0 {
			return 0, r.failed(ctx, wait)
		}
	}
	return got, nil
}

// failed decides what a failed request means: the stream gone (or
// JetStream off) ends the save; anything else is waited out.
func (r *reader) failed(ctx context.Context, wait time.Duration) error {
	cctx, cancel := context.WithTimeout(ctx, 2*time.Second)
	_, err := r.js.Stream(cctx, r.stream)
	cancel()
	switch {
	case errors.Is(err, jetstream.ErrStreamNotFound):
		return fmt.Errorf("capture: stream %s was removed while it was being saved", r.stream)
	case err != nil && (errors.Is(err, jetstream.ErrJetStreamNotEnabled) || errors.Is(err, jetstream.ErrJetStreamNotEnabledForAccount)):
		return describe(r.stream, err)
	}
	select {
	case <-ctx.Done():
	case <-time.After(wait):
	}
	return nil
}

// close deletes the reader's consumer, if any (the server would after
// readerInactive anyway), so that the next fetch makes a new one.
func (r *reader) close() {
	if r.cons == nil {
		return
	}
	ctx, cancel := context.WithTimeout(context.Background(), time.Second)
	defer cancel()
	_ = r.js.DeleteConsumer(ctx, r.stream, r.cons.CachedInfo().Name)
	r.cons = nil
}

// fetchWait is how long one fetch waits for messages: short enough that
// Save notices its idle limit and the end of the run promptly.
func fetchWait(idle time.Duration) time.Duration {
	return min(idle, 250*time.Millisecond)
}

// saver is the state of one Save.
type saver struct {
	res       *Result
	subjects  transport.Subjects
	pairs     map[pair]*pairState
	crossings map[uint64]struct{}
	create    func(run uint32) (Writer, error)
	w         Writer
	b         pb.FragmentBatch
	// chosen says res.Run is set (from the options or the first batch).
	chosen bool
	// largest is the largest message read, with room for its headers in
	// the store.
	largest int
}

// take accounts for one stored message and writes it if it belongs to the
// run.
func (sv *saver) take(subj string, data []byte) error {
	res, b := sv.res, &sv.b
	sv.largest = max(sv.largest, len(data)+len(subj)+64)
	part, src, ok := sv.subjects.ParseFragments(subj)
	if !ok || proto.Unmarshal(data, b) != nil {
		res.Undecodable++
		return nil
	}
	if !sv.chosen {
		res.Run, sv.chosen = b.Run, true
	}
	if b.Run != res.Run {
		res.OtherRuns[b.Run]++
		return nil
	}
	if sv.w == nil {
		w, err := sv.create(res.Run)
		if err != nil {
			return err
		}
		sv.w = w
	}
	st, known := sv.pairs[pair{part, src}]
	if !known {
		st = &pairState{}
	}
	// A batch whose sequence number was read already is the same batch
	// stored again if it was sent no later than the pair's latest: a
	// restarted readout's batches were sent after everything before
	// them, so they, and anything of a pair that has ended, belong to a
	// second run under the same number.
	dup := b.Sequence < st.next && b.SentUnixNs <= st.lastSent
	if known && !dup && (st.second || st.ended || b.Sequence < st.next) {
		st.second = true
		res.AfterEnd++
		return nil
	}
	for _, f := range b.Fragments {
		sv.crossings[f.Orbit<<12|uint64(f.Bcid)] = struct{}{}
	}
	if len(b.Fragments) > 0 && !dup {
		st.first = b.Fragments[0].TimestampNs
	}
	if err := sv.w.WriteBatch(src, part, st.first, data, len(b.Fragments)); err != nil {
		return fmt.Errorf("capture: %w", err)
	}
	res.Batches++
	res.Fragments += uint64(len(b.Fragments))
	switch {
	case !known:
		res.Unexpected++
	case dup:
		res.Duplicates++
	default:
		if b.Sequence > st.next {
			res.Gaps = append(res.Gaps, Gap{Partition: part, Source: src, From: st.next, To: b.Sequence - 1})
		}
		st.next = b.Sequence + 1
		st.lastSent = max(st.lastSent, b.SentUnixNs)
		if b.EndOfRun {
			st.ended = true
			res.Ended++
		}
	}
	return nil
}

// full notes whether the stream had reached its size limit: then the
// server refused whatever came after, which shows as missing batches or
// ends, and the result says why. A stream is taken as full when less
// than twice the largest batch read is left.
func (sv *saver) full(ctx context.Context, st jetstream.Stream) {
	cctx, cancel := context.WithTimeout(ctx, 2*time.Second)
	defer cancel()
	info, err := st.Info(cctx)
	if err != nil || info.Config.MaxBytes <= 0 {
		return
	}
	res := sv.res
	res.StoredBytes, res.MaxBytes = int64(info.State.Bytes), info.Config.MaxBytes
	res.Full = res.StoredBytes+2*int64(sv.largest) >= res.MaxBytes
}

// finish fills in the pairs that never ended and the crossing count.
func (sv *saver) finish() {
	res := sv.res
	res.Crossings = uint64(len(sv.crossings))
	if sv.w != nil {
		sv.w.AddCrossings(res.Crossings)
	}
	res.NotEnded = res.NotEnded[:0]
	var keys []pair
	for k, st := range sv.pairs {
		if !st.ended {
			keys = append(keys, k)
		}
	}
	sort.Slice(keys, func(i, j int) bool {
		if keys[i].source != keys[j].source {
			return keys[i].source < keys[j].source
		}
		return keys[i].partition < keys[j].partition
	})
	for _, k := range keys {
		res.NotEnded = append(res.NotEnded, fmt.Sprintf("source %d share %d", k.source, k.partition))
	}
}
