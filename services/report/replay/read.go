package replay

import (
	"context"
	"errors"
	"io"
	"sync"

	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/recording"
)

// A stream is read in three stages, so that the goroutine owning the
// builder does little more than build: one goroutine reads the file
// (frame checksums and decompression, in recording.Reader) and copies
// runs of batches into read jobs; decoding goroutines decode each job's
// batches into fragments and compare every fragment's checksum with its
// content; the feeder then hands the fragments, with the outcome, to the
// builder in file order (builder.AddChecked). Truth records travel in the
// jobs, in their place between the batches, so the feeder sees exactly
// the sequence a single reader would.

// Job bounds: a job closes at whichever comes first.
const (
	jobBatches = 16
	jobBytes   = 64 << 10
)

// readJob is a run of consecutive batches and truth records of a stream,
// and, once decoded, their fragments.
type readJob struct {
	data    []byte     // the batches' FragmentBatch bytes, back to back
	batches []jobBatch // in file order
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
	ready  chan struct{}  // closed once decoded
}

// jobBatch locates one batch in its job.
type jobBatch struct {
	start, end int // in data
	first, n   int // its fragments in frags
	bad        bool
}

func (j *readJob) reset() {
	j.data, j.batches, j.ntruth, j.truthAt = j.data[:0], j.batches[:0], 0, j.truthAt[:0]
	j.offset, j.err, j.eof = 0, nil, false
	j.frags, j.intact = j.frags[:0], j.intact[:0]
	j.ready = make(chan struct{})
}

// addTruth keeps a copy of rec, reusing the storage of earlier jobs.
func (j *readJob) addTruth(rec *recording.TruthRecord) {
	if j.ntruth == len(j.truth) {
		j.truth = append(j.truth, recording.TruthRecord{})
	}
	t := &j.truth[j.ntruth]
	hard, objs := t.Truth.Hard[:0], t.Truth.Objects[:0]
	*t = *rec
	t.Truth.Hard = append(hard, rec.Truth.Hard...)
	t.Truth.Objects = append(objs, rec.Truth.Objects...)
	j.ntruth++
	j.truthAt = append(j.truthAt, len(j.batches))
}

func (j *readJob) full() bool { return len(j.batches) >= jobBatches || len(j.data) >= jobBytes }

// decode decodes every batch of j into fragments from cache and checks
// their checksums, with fz.
func (j *readJob) decode(cache *slotCache, fz *fuser) {
	for i := range j.batches {
		b := &j.batches[i]
		b.first = len(j.frags)
		var err error
		j.frags, j.intact, err = fz.decodeBatch(j.data[b.start:b.end], cache, j.frags, j.intact)
		b.n = len(j.frags) - b.first
		b.bad = err != nil
	}
}

// read is the reading goroutine: it fills jobs from free and sends each
// to ordered, for the feeder, and to work, for the decoders, until the
// end of the stream, damage, or ctx ends. It closes work and ordered
// when it returns.
func (s *StreamSource) read(ctx context.Context, free, ordered, work chan *readJob) {
	defer close(work)
	defer close(ordered)
	var j *readJob
	if s.sample.Truth {
		s.r.OnTruth(func(rec *recording.TruthRecord) { j.addTruth(rec) })
	}
	send := func() bool {
		j.offset = s.r.Offset()
		select {
		case ordered <- j:
		case <-ctx.Done():
			return false
		}
		work <- j
		j = nil
		return true
	}
	for {
		if j == nil {
			select {
			case j = <-free:
				j.reset()
			case <-ctx.Done():
				return
			}
		}
		b, err := s.r.Next()
		if err != nil {
			if errors.Is(err, io.EOF) {
				j.eof = true
			} else {
				j.err = err
			}
			send()
			return
		}
		start := len(j.data)
		j.data = append(j.data, b.Data...)
		j.batches = append(j.batches, jobBatch{start: start, end: len(j.data)})
		if j.full() && !send() {
			return
		}
	}
}

func (s *StreamSource) feed(ctx context.Context, fd *feeder) error {
	ctx, cancel := context.WithCancel(ctx)
	decoders := max(fd.decoders, 1)
	inFlight := decoders + 2
	free := make(chan *readJob, inFlight)
	ordered := make(chan *readJob, inFlight)
	work := make(chan *readJob, inFlight)
	for range inFlight {
		free <- &readJob{}
	}
	var wg sync.WaitGroup
	wg.Go(func() { s.read(ctx, free, ordered, work) })
	for range decoders {
		wg.Go(func() {
			cache := fd.pool.cache()
			fz := newFuser(fd.table)
			for j := range work {
				j.decode(cache, fz)
				close(j.ready)
			}
		})
	}
	// On an early return the reader stops at ctx and closes work, which
	// ends the decoders.
	defer wg.Wait()
	defer cancel()
	for j := range ordered {
		<-j.ready
		if err := ctx.Err(); err != nil {
			return err
		}
		t := 0
		for i := range j.batches {
			for ; t < j.ntruth && j.truthAt[t] <= i; t++ {
				fd.addTruth(&j.truth[t])
			}
			b := &j.batches[i]
			fd.batches++
			// End-of-run markers carry no fragments: a replay ends with
			// the file.
			if b.bad {
				fd.undecodable++
				continue
			}
			for k := b.first; k < b.first+b.n; k++ {
				fd.addChecked(j.frags[k], j.intact[k])
			}
		}
		for ; t < j.ntruth; t++ {
			fd.addTruth(&j.truth[t])
		}
		if s.size > 0 {
			fd.progress(float64(j.offset) / float64(s.size))
		}
		switch {
		case j.err != nil:
			// Damage: what came before has been delivered; the report
			// covers it and says where reading stopped.
			fd.inputError(j.err)
			return nil
		case j.eof:
			return nil
		}
		free <- j
	}
	// The reader stopped without a last job: ctx ended.
	return ctx.Err()
}
