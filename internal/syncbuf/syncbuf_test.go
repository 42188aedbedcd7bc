package syncbuf

import (
	"sync"
	"testing"
)

// Concurrent writers lose nothing (run under -race), and a limit keeps
// exactly the first Limit bytes while every write still reports success.
func TestBuffer(t *testing.T) {
	var b Buffer
	var wg sync.WaitGroup
	for range 8 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for range 100 {
				_, _ = b.Write([]byte("ab"))
				_ = b.String()
			}
		}()
	}
	wg.Wait()
	if got := len(b.String()); got != 8*100*2 {
		t.Fatalf("kept %d bytes, want 1600", got)
	}

	l := Buffer{Limit: 5}
	for _, w := range []string{"abc", "defg", "hij"} {
		if n, err := l.Write([]byte(w)); n != len(w) || err != nil {
			t.Fatalf("Write(%q) = %d, %v", w, n, err)
		}
	}
	if got := l.String(); got != "abcde" {
		t.Fatalf("limited buffer kept %q, want %q", got, "abcde")
	}
}
