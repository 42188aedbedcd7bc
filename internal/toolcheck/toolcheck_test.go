package toolcheck

import (
	"runtime"
	"testing"
)

// recorder stands for a test: it notes how Missing ended it (Missing
// calls no other method of testing.TB).
type recorder struct {
	testing.TB
	skipped, failed bool
}

func (r *recorder) Helper()               {}
func (r *recorder) Skip(...any)           { r.skipped = true; runtime.Goexit() }
func (r *recorder) Fatal(...any)          { r.failed = true; runtime.Goexit() }
func (r *recorder) Fatalf(string, ...any) { r.failed = true; runtime.Goexit() }

// A missing program skips unless RequireEnv says true; a value that says
// neither fails, so a slip in CI's setting cannot turn failures into
// skips.
func TestMissingSkipsOrFails(t *testing.T) {
	for _, tc := range []struct {
		value string
		fail  bool
	}{
		{"", false}, {"0", false}, {"false", false}, {"no", false},
		{"1", true}, {"true", true}, {"TRUE", true}, {"yes", true}, {"on", true},
		{"ture", true}, {"2", true},
	} {
		t.Setenv(RequireEnv, tc.value)
		r := &recorder{}
		done := make(chan struct{})
		go func() { defer close(done); Missing(r, "no such program") }()
		<-done
		if r.failed != tc.fail || r.skipped == tc.fail {
			t.Errorf("%s=%q: failed %v, skipped %v; want failed %v", RequireEnv, tc.value, r.failed, r.skipped, tc.fail)
		}
	}
}
