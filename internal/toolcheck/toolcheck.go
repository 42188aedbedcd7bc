// Package toolcheck decides what a test does when an outside program it
// needs (a browser, a Prometheus server, a nats-server) is not installed:
// it skips under plain go test, and fails when BUNCHSIEVE_REQUIRE_TOOLS=1,
// which CI sets after installing them, so that CI cannot pass by skipping.
package toolcheck

import (
	"os"
	"strings"
	"testing"
)

// RequireEnv is the environment variable that turns a missing program
// from a skip into a failure.
const RequireEnv = "BUNCHSIEVE_REQUIRE_TOOLS"

// Missing ends t for want of a program, msg saying which and how to
// install it: a failure with RequireEnv set to a true value (1, true,
// yes), a skip otherwise. A value that is neither true nor false fails
// too, rather than let a typing slip turn CI's failures into skips.
func Missing(t testing.TB, msg string) {
	t.Helper()
	v := os.Getenv(RequireEnv)
	switch strings.ToLower(v) {
	case "", "0", "false", "no", "off":
		t.Skip(msg)
	case "1", "true", "yes", "on":
		t.Fatal(msg + "; " + RequireEnv + "=" + v + " requires it")
	}
	t.Fatalf("%s; %s=%q is neither true (1, true, yes, on) nor false (0, false, no, off)", msg, RequireEnv, v)
}
