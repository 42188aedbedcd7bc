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
	// Idle bounds how long Since goes on when the stream cannot be read
	// (a server restarting); zero means 5 s.
	Idle time.Duration
	// Quiet is how long Since waits for the stream to store anything new
	// before it ends, when take has not said it has enough; zero means
	// 1 s.
	Quiet time.Duration
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

// Since hands take, in stream order, every batch on subjects matching
// subject that the stream stored at or after since, until take says it
// has enough (more false) or nothing new has been stored for b.Quiet.
// The stream stores a batch a little after the server routes it, so its
// end when Since is called bounds nothing: a batch published before the
// caller subscribed may be stored later, under load by tens of
// milliseconds. The caller, which sees its live batches, knows when the
// stream has reached them. Since returns take's first error, an error
// when the stream is missing, and one when the stream could not be read
// for b.Idle.
func (b Backlog) Since(ctx context.Context, subject string, since time.Time, take func(subject string, data []byte) (more bool, err error)) error {
	name := b.Name
	if name == "" {
		name = DefaultName(transport.Subjects{})
	}
	idle := b.Idle
	if idle <= 0 {
		idle = 5 * time.Second
	}
	quiet := b.Quiet
	if quiet <= 0 {
		quiet = time.Second
	}
	if _, err := b.JS.Stream(ctx, name); err != nil {
		return describe(name, err)
	}
	rd := &reader{js: b.JS, stream: name, since: since, filter: subject}
	defer rd.close()
	readable, newest := time.Now(), time.Now()
	for {
		if err := ctx.Err(); err != nil {
			return err
		}
		enough := false
		got, err := rd.fetch(ctx, fetchWait(quiet), func(m jetstream.Msg, _ *jetstream.MsgMetadata) error {
			if enough {
				return nil // the rest of the fetch is not wanted
			}
			more, err := take(m.Subject(), m.Data())
			enough = !more
			return err
		})
		switch {
		case err != nil:
			return err
		case enough:
			return nil
		case got > 0:
			readable, newest = time.Now(), time.Now()
		case rd.cons == nil:
			// The reading failed (reader.fetch waited before returning).
			if time.Since(readable) >= idle {
				return fmt.Errorf("capture: stream %s could not be read for %v", name, idle)
			}
		default:
			readable = time.Now()
			if time.Since(newest) >= quiet {
				return nil
			}
		}
	}
}
