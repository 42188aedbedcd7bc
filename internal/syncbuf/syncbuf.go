// Package syncbuf has a byte buffer that the goroutines copying a child
// process's output and a test polling that output can use at once.
package syncbuf

import (
	"bytes"
	"sync"
)

// Buffer collects bytes written to it. The zero value is an empty buffer
// without a limit, ready for use; it is safe for concurrent use.
type Buffer struct {
	// Limit, when positive, is the most bytes kept: later writes are
	// discarded but reported as written, so a chatty child cannot fill the
	// memory or fail on its output. Zero means no limit.
	Limit int

	mu sync.Mutex
	b  bytes.Buffer
}

// Write appends p, or as much of it as the limit leaves room for.
func (s *Buffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.Limit > 0 {
		room := s.Limit - s.b.Len()
		if room <= 0 {
			return len(p), nil
		}
		if len(p) > room {
			s.b.Write(p[:room])
			return len(p), nil
		}
	}
	return s.b.Write(p)
}

// String returns what was kept so far.
func (s *Buffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}
