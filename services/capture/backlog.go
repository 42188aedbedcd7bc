package capture

import (
	"context"
	"fmt"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"github.com/bunchsieve/bunchsieve/services/transport"
)

// Backlog reads a capture stream for a builder restarted within a run, so
// that it builds the batches published while no builder ran
// (assembler.Config.CatchUp). The zero value is not usable. It is safe
// for concurrent use: every Since reads through a consumer of its own.
type Backlog struct {
	JS jetstream.JetStream
	// Name is the stream's name; empty means DefaultName of the default
	// subject prefix.
	Name string
	// Idle bounds how long Since waits for the next batch while batches
	// are still to be read (a server restarting); zero means 5 s.
	Idle time.Duration
}

// FindBacklog returns the Backlog of the capture stream of subjects s
// named name (empty: DefaultName(s)), after checking that the stream
// exists and stores the batches of s, so that a builder told to catch up
// fails at its start rather than losing batches later.
func FindBacklog(ctx context.Context, js jetstream.JetStream, name string, s transport.Subjects) (Backlog, error) {
	if name == "" {
		name = DefaultName(s)
	}
	st, err := js.Stream(ctx, name)
	if err != nil {
		return Backlog{}, describe(name, err)
	}
	if want, have := s.AllFragments(), st.CachedInfo().Config.Subjects; len(have) != 1 || have[0] != want {
		return Backlog{}, fmt.Errorf("capture: stream %s stores %v, not the batches of this subject prefix (%s)", name, have, want)
	}
	return Backlog{JS: js, Name: name}, nil
}

// Since hands take every batch on subjects matching subject that the
// stream stored at or after since, in stream order, up to the last one
// stored when Since was called (later ones the caller, subscribed before
// the call, receives live); it returns take's first error,
// an error when the stream is missing, and one when no batch came for
// b.Idle with some still to read.
func (b Backlog) Since(ctx context.Context, subject string, since time.Time, take func(subject string, data []byte) error) error {
	name := b.Name
	if name == "" {
		name = DefaultName(transport.Subjects{})
	}
	idle := b.Idle
	if idle <= 0 {
		idle = 5 * time.Second
	}
	stream, err := b.JS.Stream(ctx, name)
	if err != nil {
		return describe(name, err)
	}
	state := stream.CachedInfo().State
	if state.LastSeq == 0 || state.LastTime.Before(since) {
		return nil // nothing stored since
	}
	target := state.LastSeq
	rd := &reader{js: b.JS, stream: name, since: since, filter: subject}
	defer rd.close()
	last := time.Now()
	for rd.next <= target {
		if err := ctx.Err(); err != nil {
			return err
		}
		done := false
		got, err := rd.fetch(ctx, fetchWait(idle), func(m jetstream.Msg, md *jetstream.MsgMetadata) error {
			if md.Sequence.Stream > target {
				// Published after Since was called: the caller
				// receives it live.
				done = true
				return nil
			}
			// Nothing more matches the filter for now: whatever comes
			// later is after target.
			done = done || md.NumPending == 0
			return take(m.Subject(), m.Data())
		})
		if err != nil {
			return err
		}
		if got > 0 {
			last = time.Now()
		} else if rd.cons != nil && rd.cons.CachedInfo().NumPending == 0 {
			done = true // the consumer found nothing since
		}
		if done {
			return nil
		}
		if time.Since(last) >= idle {
			return fmt.Errorf("capture: stream %s: no batch read for %v, with batches up to sequence %d still to read", name, idle, target)
		}
	}
	return nil
}
