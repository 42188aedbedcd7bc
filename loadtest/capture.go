package loadtest

import (
	"context"
	"fmt"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"github.com/bunchsieve/bunchsieve/services/capture"
	"github.com/bunchsieve/bunchsieve/services/transport"
)

// defaultCaptureBytes caps the capture stream of one step when
// Config.CaptureBytes is zero: a 3 s step at 200,000 crossings/s of the
// toy generator's 1.1 kB stores about 660 MB.
const defaultCaptureBytes = 2 << 30

// stepCapture is the durable capture (services/capture) of one step's
// fragment batches: the stream is opened before the feed starts and
// removed after the step, so that steps do not fill the store.
type stepCapture struct {
	nc   *nats.Conn
	js   jetstream.JetStream
	st   jetstream.Stream
	name string
}

func openStepCapture(nw *Network, s transport.Subjects, maxBytes int64) (*stepCapture, error) {
	if maxBytes == 0 {
		maxBytes = defaultCaptureBytes
	}
	nc, err := nw.Connect("loadtest-capture")
	if err != nil {
		return nil, err
	}
	js, err := jetstream.New(nc)
	if err != nil {
		nc.Close()
		return nil, fmt.Errorf("loadtest: capture: %w", err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	st, created, err := capture.Open(ctx, js, capture.Options{Subjects: s, MaxBytes: maxBytes})
	if err != nil {
		nc.Close()
		return nil, fmt.Errorf("loadtest: %w", err)
	}
	name := st.CachedInfo().Config.Name
	if !created {
		// Someone else's stream (an earlier test with this prefix on the
		// same deployment): its batches would count as this step's, and
		// removing it after the step would lose them.
		nc.Close()
		return nil, fmt.Errorf("loadtest: a capture stream %s exists already on the deployment; remove it (bunchsieve capture remove --name %s) or choose another --subject-prefix", name, name)
	}
	return &stepCapture{nc: nc, js: js, st: st, name: name}, nil
}

// stored returns how many batches the stream holds once it holds want,
// or once its count has not moved for settle: the server stores a batch
// after it has routed it, so the last ones may arrive after the step's
// events were decided.
func (c *stepCapture) stored(want uint64, settle time.Duration) (uint64, error) {
	var last uint64
	moved := time.Now()
	for {
		ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
		info, err := c.st.Info(ctx)
		cancel()
		if err != nil {
			return last, fmt.Errorf("loadtest: capture %s: %w", c.name, err)
		}
		n := info.State.Msgs
		if n >= want {
			return n, nil
		}
		if n != last {
			last, moved = n, time.Now()
		} else if time.Since(moved) > settle {
			return n, nil
		}
		time.Sleep(20 * time.Millisecond)
	}
}

// close removes the stream with what it stored and closes the connection.
func (c *stepCapture) close() error {
	defer c.nc.Close()
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	if err := capture.Remove(ctx, c.js, c.name); err != nil {
		return fmt.Errorf("loadtest: %w", err)
	}
	return nil
}
