package loadtest

import (
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
)

// AwaitInterest returns once every member of a cluster knows of a
// subscription made on one of them, and fails, naming the subject, for a
// subject nobody subscribed to.
func TestAwaitInterestAcrossTheCluster(t *testing.T) {
	nw, err := Cluster(3, 10*time.Second)
	if err != nil {
		t.Fatal(err)
	}
	defer nw.Close()
	nc, err := nw.Connect("interest-test")
	if err != nil {
		t.Fatal(err)
	}
	defer nc.Close()
	if _, err := nc.Subscribe("interest.test.>", func(*nats.Msg) {}); err != nil {
		t.Fatal(err)
	}
	if err := nc.Flush(); err != nil {
		t.Fatal(err)
	}
	if err := nw.AwaitInterest([]string{"interest.test.a"}, 10*time.Second); err != nil {
		t.Fatal(err)
	}
	for _, s := range nw.srvs {
		if !s.GlobalAccount().SubscriptionInterest("interest.test.b") {
			t.Errorf("server %s has no interest after AwaitInterest returned", s.Name())
		}
	}
	err = nw.AwaitInterest([]string{"interest.test.a", "nobody.here"}, 50*time.Millisecond)
	if err == nil || !strings.Contains(err.Error(), "nobody.here") {
		t.Errorf("a subject without subscribers: %v", err)
	}
}
