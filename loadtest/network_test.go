package loadtest

import (
	"fmt"
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
	// Many subscriptions in one burst, so that the routes are still
	// carrying them when the local server has confirmed the last.
	const subs = 500
	for i := range subs {
		if _, err := nc.Subscribe(fmt.Sprintf("interest.test.%d", i), func(*nats.Msg) {}); err != nil {
			t.Fatal(err)
		}
	}
	if err := nc.Flush(); err != nil {
		t.Fatal(err)
	}
	last := fmt.Sprintf("interest.test.%d", subs-1)
	if err := nw.AwaitInterest([]string{last}, 10*time.Second); err != nil {
		t.Fatal(err)
	}
	for _, s := range nw.srvs {
		if !s.GlobalAccount().SubscriptionInterest(last) {
			t.Errorf("server %s has no interest in %s after AwaitInterest returned", s.Name(), last)
		}
	}
	err = nw.AwaitInterest([]string{last, "nobody.here"}, 50*time.Millisecond)
	if err == nil || !strings.Contains(err.Error(), "nobody.here") {
		t.Errorf("a subject without subscribers: %v", err)
	}
}
