package assembler

import (
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"
)

// builderState is where an interrupted builder stopped in its run: what a
// builder taking over needs so that it emits no crossing a second time
// and its end-of-run batch counts every event of the share.
type builderState struct {
	Run       uint32 `json:"run"`
	Instance  int    `json:"instance"`
	Instances int    `json:"instances"`
	// ClosedNs is the builder's closing time after its final flush.
	ClosedNs int64 `json:"closed_ns"`
	// Seq is the sequence number of the next event batch.
	Seq uint64 `json:"next_batch_seq"`
	// Emitted counts the events of the share emitted so far.
	Emitted uint64 `json:"events_emitted"`
	// StoppedUnixNs is when the builder stopped taking fragment batches
	// (wall clock); the one taking over reads the capture stream from a
	// little before it (Config.CatchUp). Zero in files written before it
	// was kept: no catch-up then.
	StoppedUnixNs int64 `json:"stopped_unix_ns,omitempty"`
	// LastBatch is the highest batch sequence number taken from each
	// source, so that a batch read from the capture stream and again
	// live is taken once.
	LastBatch map[uint32]uint64 `json:"last_batch_by_source,omitempty"`
	// LastSent is, per source, the latest send time (Unix ns, the
	// readout's clock) of a batch taken: a batch numbered at or below
	// LastBatch but sent after it is from a readout started again, not
	// a repeat. Absent in files written before it was kept.
	LastSent map[uint32]int64 `json:"last_sent_unix_ns_by_source,omitempty"`
}

// readState reads a state file; nil, nil when there is none.
func readState(path string) (*builderState, error) {
	data, err := os.ReadFile(path)
	if errors.Is(err, os.ErrNotExist) {
		return nil, nil
	}
	if err != nil {
		return nil, fmt.Errorf("assembler: %w", err)
	}
	var st builderState
	if err := json.Unmarshal(data, &st); err != nil {
		return nil, fmt.Errorf("assembler: state file %s: %w", path, err)
	}
	return &st, nil
}

// writeState writes st to path through a file beside it and a rename, so
// a crash while writing leaves the old state or the new one, never half.
func writeState(path string, st builderState) error {
	data, err := json.MarshalIndent(st, "", "  ")
	if err != nil {
		return fmt.Errorf("assembler: %w", err)
	}
	tmp, err := os.CreateTemp(filepath.Dir(path), filepath.Base(path)+".*")
	if err != nil {
		return fmt.Errorf("assembler: state file: %w", err)
	}
	_, werr := tmp.Write(append(data, '\n'))
	cerr := tmp.Close()
	if err := errors.Join(werr, cerr); err != nil {
		os.Remove(tmp.Name())
		return fmt.Errorf("assembler: state file: %w", err)
	}
	if err := os.Rename(tmp.Name(), path); err != nil {
		os.Remove(tmp.Name())
		return fmt.Errorf("assembler: state file: %w", err)
	}
	return nil
}
