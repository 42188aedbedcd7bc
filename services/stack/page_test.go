package stack_test

import (
	"context"
	"encoding/json"
	"path/filepath"
	"testing"
	"time"

	"github.com/bunchsieve/bunchsieve/services/runconfig"
	"github.com/bunchsieve/bunchsieve/services/stack"
	"github.com/bunchsieve/bunchsieve/services/web"
	"github.com/bunchsieve/bunchsieve/services/web/webtest"
)

// A real headless browser opens the page of a running stack: it sees the
// run state and the rule names, and the accept rates change while the run
// flows. The screenshot is kept among the test's artifacts.
func TestPageOfRunningStack(t *testing.T) {
	b := webtest.Start(t) // skips without chromium unless BUNCHSIEVE_REQUIRE_TOOLS=1
	rc := runconfig.Default()
	rc.RateHz = 3000
	st, err := stack.New(stack.Options{Run: rc, MetricsAddr: "127.0.0.1:0"})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(st.Close)
	st.Host().Handle("/", web.Handler(st.Page()))
	stop, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() {
		_, err := st.Run(stop)
		done <- err
	}()
	defer func() {
		cancel()
		if err := <-done; err != nil {
			t.Error(err)
		}
	}()

	p := b.Open(t, st.Host().BaseURL())
	p.WaitFor(t, `document.getElementById("phase").textContent === "flowing"`, 20*time.Second)
	var names []string
	p.Eval(t, `[...document.querySelectorAll("#rules tbody tr")].map(r => r.querySelector("td.name").textContent)`, &names)
	want := st.Chain().Selector().Trigger().RuleNames()
	if len(names) != len(want) {
		t.Fatalf("page lists rules %v, menu has %v", names, want)
	}
	for i := range want {
		if names[i] != want[i] {
			t.Fatalf("page lists rules %v, menu has %v", names, want)
		}
	}
	const rates = `JSON.stringify([...document.querySelectorAll("#rules td.acc-hz")].map(td => td.textContent))`
	var first string
	p.Eval(t, rates, &first)
	quoted, _ := json.Marshal(first)
	p.WaitFor(t, rates+` !== `+string(quoted), 15*time.Second)
	if errs := p.Errors(); len(errs) > 0 {
		t.Errorf("the page reported errors: %v", errs)
	}
	shot := filepath.Join(t.ArtifactDir(), "running-stack.png")
	p.Screenshot(t, shot)
	t.Logf("screenshot: %s", shot)
}
