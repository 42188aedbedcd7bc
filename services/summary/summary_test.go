package summary

import (
	"strings"
	"testing"
)

// Each stage's summary shows what that stage counted and nothing it has
// no part in: a builder has no seed, decisions or menu, a selection worker
// no crossings, fragments or building.
func TestStageSummaries(t *testing.T) {
	s := &Summary{
		Run: 7, Sources: 16, DurationS: 2, EventsBuilt: 1000, EventsComplete: 990, EventsIncomplete: 10,
		EventsDecided: 1000, Accepted: 30, Menu: "lantern-starter", MenuHash: "abc", PrescaleSet: "nominal",
		Fragments: Fragments{Received: 16000, InEvents: 15990, Late: 10},
		Rules:     []Rule{{Name: "met-120", Prescale: 1, Passed: 30, Accepted: 30}},
	}
	var b, sel strings.Builder
	s.PrintBuild(&b)
	s.PrintSelection(&sel)
	for _, c := range []struct {
		name, out  string
		want, lack []string
	}{
		{"builder", b.String(), []string{"run 7", "16 sources", "built 1000 (500/s; complete 990, incomplete 10)", "fragments received 16000", "(closed)", "build p50"},
			[]string{"seed", "decided", "menu", "met-120", "end to end"}},
		{"selection", sel.String(), []string{"run 7", "decided 1000 (500/s)", "accepted 30 (15.0/s)", "end to end p50", "menu lantern-starter (abc), prescale set nominal", "met-120"},
			[]string{"seed", "sources", "fragments", "built", "crossings"}},
	} {
		for _, w := range c.want {
			if !strings.Contains(c.out, w) {
				t.Errorf("%s summary lacks %q:\n%s", c.name, w, c.out)
			}
		}
		for _, l := range c.lack {
			if strings.Contains(c.out, l) {
				t.Errorf("%s summary shows %q, which it has no part in:\n%s", c.name, l, c.out)
			}
		}
	}
}
