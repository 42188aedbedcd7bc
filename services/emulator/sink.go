package emulator

import (
	"fmt"

	"github.com/nats-io/nats.go"

	"github.com/bunchsieve/bunchsieve/services/recording"
	"github.com/bunchsieve/bunchsieve/services/transport"
)

// Sink receives the emulator's encoded fragment batches: NATS for a live
// run, a stream file for a recording. The data slice is reused after Send
// returns.
type Sink interface {
	Send(partition int, source uint32, firstTimestampNs int64, data []byte, fragments int) error
	// Flush pushes out anything buffered.
	Flush() error
}

// NATSSink publishes batches on the fragment subjects.
type NATSSink struct {
	nc       *nats.Conn
	subjects transport.Subjects
	names    map[[2]uint32]string
}

// NewNATSSink returns a sink publishing on nc.
func NewNATSSink(nc *nats.Conn, s transport.Subjects) *NATSSink {
	return &NATSSink{nc: nc, subjects: s, names: make(map[[2]uint32]string)}
}

// Send publishes one batch.
func (s *NATSSink) Send(partition int, source uint32, _ int64, data []byte, _ int) error {
	key := [2]uint32{uint32(partition), source}
	subj, ok := s.names[key]
	if !ok {
		subj = s.subjects.Fragments(partition, source)
		s.names[key] = subj
	}
	if err := s.nc.Publish(subj, data); err != nil {
		return fmt.Errorf("emulator: publish source %d: %w", source, err)
	}
	return nil
}

// Flush waits until the server has everything published so far.
func (s *NATSSink) Flush() error {
	if err := s.nc.Flush(); err != nil {
		return fmt.Errorf("emulator: flush: %w", err)
	}
	return nil
}

// FileSink writes batches into a stream file.
type FileSink struct{ W *recording.Writer }

// Send appends one batch to the file.
func (s FileSink) Send(partition int, source uint32, firstTs int64, data []byte, fragments int) error {
	return s.W.WriteBatch(source, partition, firstTs, data, fragments)
}

// Flush does nothing: the writer flushes on Close.
func (s FileSink) Flush() error { return nil }
