// Package toolcheck decides what a test does when an outside program it
// needs (a browser, a Prometheus server, a nats-server) is not installed:
// it skips under plain go test, and fails when BUNCHSIEVE_REQUIRE_TOOLS=1,
// which CI sets after installing them, so that CI cannot pass by skipping.
package toolcheck

import (
	"os"
	"testing"
)

// RequireEnv is the environment variable that turns a missing program
// from a skip into a failure.
const RequireEnv = "BUNCHSIEVE_REQUIRE_TOOLS"

// Missing ends t for want of a program, msg saying which and how to
// install it: a failure with RequireEnv=1, a skip otherwise.
func Missing(t testing.TB, msg string) {
	t.Helper()
	if os.Getenv(RequireEnv) == "1" {
		t.Fatal(msg + "; " + RequireEnv + "=1 requires it")
	}
	t.Skip(msg)
}
