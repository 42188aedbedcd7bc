package replay

import (
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/recording"
)

// A lane (lanes.go) reads its stream in jobs: runs of consecutive
// batches, decoded as they are read, with the truth records that came
// between them in their place, so the builder sees exactly the sequence a
// single reader would. Every lane cuts the same jobs.

// Job bounds: a job closes at whichever comes first.
const (
	jobBatches = 16
	jobBytes   = 64 << 10
)

// readJob is a run of consecutive batches and truth records of a stream,
// decoded into fragments.
type readJob struct {
	batches []jobBatch // in file order
	bytes   int        // the batches' encoded size
	truth   []recording.TruthRecord
	ntruth  int
	truthAt []int // truth record i came before batch truthAt[i]
	// offset is the reader's file offset after the job, for progress; err
	// the damage that ended reading, or nil; eof is set on the last job of
	// an intact stream.
	offset int64
	err    error
	eof    bool

	frags  []*pb.Fragment // decoded, batch by batch
	intact []bool         // per fragment: its checksum matches
	owner  []int32        // per fragment: the lane of its crossing
	others []*verdicts    // the other lanes' verdicts on the job, by lane
}

// jobBatch locates the fragments of one batch in its job.
type jobBatch struct {
	first, n int // its fragments in frags
	bad      bool
}

func (j *readJob) reset() {
	j.batches, j.bytes, j.ntruth, j.truthAt = j.batches[:0], 0, 0, j.truthAt[:0]
	j.offset, j.err, j.eof = 0, nil, false
	j.frags, j.intact, j.owner = j.frags[:0], j.intact[:0], j.owner[:0]
	clear(j.others)
}

// addTruth keeps a copy of rec, reusing the storage of earlier jobs.
func (j *readJob) addTruth(rec *recording.TruthRecord) {
	if j.ntruth == len(j.truth) {
		j.truth = append(j.truth, recording.TruthRecord{})
	}
	copyTruth(&j.truth[j.ntruth], rec)
	j.ntruth++
	j.truthAt = append(j.truthAt, len(j.batches))
}

func (j *readJob) full() bool { return len(j.batches) >= jobBatches || j.bytes >= jobBytes }

// copyTruth copies rec into t, reusing t's storage.
func copyTruth(t, rec *recording.TruthRecord) {
	hard, objs := t.Truth.Hard[:0], t.Truth.Objects[:0]
	*t = *rec
	t.Truth.Hard = append(hard, rec.Truth.Hard...)
	t.Truth.Objects = append(objs, rec.Truth.Objects...)
}

// truthStore keeps copies of truth records by crossing until their event
// is emitted, reusing the storage of records whose events are done. It
// is used by one goroutine.
type truthStore struct {
	byKey map[uint64]*recording.TruthRecord
	spare []*recording.TruthRecord
}

// keep stores a copy of rec under key, replacing an earlier one.
func (s *truthStore) keep(key uint64, rec *recording.TruthRecord) {
	if s.byKey == nil {
		s.byKey = make(map[uint64]*recording.TruthRecord)
	}
	t := s.byKey[key]
	if t == nil {
		if n := len(s.spare); n > 0 {
			t, s.spare = s.spare[n-1], s.spare[:n-1]
		} else {
			t = new(recording.TruthRecord)
		}
		s.byKey[key] = t
	}
	copyTruth(t, rec)
}

// take removes and returns the record of key, or nil.
func (s *truthStore) take(key uint64) *recording.TruthRecord {
	t := s.byKey[key]
	if t != nil {
		delete(s.byKey, key)
	}
	return t
}

// recycle gives back a record from take once nothing reads it.
func (s *truthStore) recycle(t *recording.TruthRecord) { s.spare = append(s.spare, t) }
