package transport

import (
	"bytes"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
)

// Both kinds of connection get the raised write buffer and the pending
// limits, and carry a message larger than the client's default 32 KiB
// buffer intact, in process and over loopback TCP.
func TestConnectionsCarryLargeMessages(t *testing.T) {
	srv, err := Embedded("", -1)
	if err != nil {
		t.Fatal(err)
	}
	defer func() { srv.Shutdown(); srv.WaitForShutdown() }()
	inproc, err := ConnectInProcess(srv, "test-inprocess")
	if err != nil {
		t.Fatal(err)
	}
	defer inproc.Close()
	tcp, err := Connect(srv.ClientURL(), "test-tcp")
	if err != nil {
		t.Fatal(err)
	}
	defer tcp.Close()
	payload := bytes.Repeat([]byte("bunch crossing "), 10000) // 150 kB
	for _, c := range []struct {
		name string
		nc   *nats.Conn
	}{{"in process", inproc}, {"tcp", tcp}} {
		if got := c.nc.Opts.WriteBufferSize; got != writeBuffer {
			t.Errorf("%s: write buffer %d bytes, want %d", c.name, got, writeBuffer)
		}
		got := make(chan []byte, 1)
		sub, err := Subscribe(c.nc, "large."+c.nc.Opts.Name, "", func(m *nats.Msg) { got <- m.Data })
		if err != nil {
			t.Fatal(err)
		}
		if msgs, size, _ := sub.PendingLimits(); msgs != PendingMsgs || size != PendingBytes {
			t.Errorf("%s: pending limits %d messages, %d bytes", c.name, msgs, size)
		}
		if err := c.nc.Flush(); err != nil {
			t.Fatal(err)
		}
		if err := c.nc.Publish("large."+c.nc.Opts.Name, payload); err != nil {
			t.Fatal(err)
		}
		select {
		case data := <-got:
			if !bytes.Equal(data, payload) {
				t.Errorf("%s: %d bytes arrived, not the %d sent", c.name, len(data), len(payload))
			}
		case <-time.After(10 * time.Second):
			t.Fatalf("%s: the message did not arrive", c.name)
		}
		sub.Unsubscribe()
	}
	if _, err := Connect("", "nobody"); err == nil {
		t.Error("an empty URL connected")
	}
}
