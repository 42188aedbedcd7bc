package trigger

import (
	"bytes"
	"math/rand/v2"
	"os"
	"slices"
	"strings"
	"testing"
)

const starterPath = "../examples/menus/starter.yaml"

func TestStarterMenuParses(t *testing.T) {
	m, err := LoadMenu(starterPath)
	if err != nil {
		t.Fatal(err)
	}
	if m.Name != "lantern-starter" || m.Version != 1 || m.ActiveSet != "nominal" {
		t.Fatalf("menu %q version %d active %q", m.Name, m.Version, m.ActiveSet)
	}
	want := []string{"met-120", "sumet-900", "ht-400", "one-jet-180", "two-jets-80", "dijet-mass-500", "jet-met-60", "random-keep"}
	s := mustSelector(t, m)
	if got := s.RuleNames(); !slices.Equal(got, want) {
		t.Fatalf("rules %v, want %v", got, want)
	}
	if got := m.SetNames(); !slices.Equal(got, []string{BaseSet, "nominal", "quiet"}) {
		t.Fatalf("sets %v", got)
	}
	if len(m.Streams) != 2 || m.Streams[0].Name != "physics" || m.Streams[1].Name != "calibration" {
		t.Fatalf("streams %+v", m.Streams)
	}
	quiet, _ := m.Prescales("quiet")
	if !slices.Equal(quiet, []int{1, 40, 2, 1, 1, 20, 1, 0}) {
		t.Fatalf("quiet prescales %v", quiet)
	}
	// Decide on synthetic events: the pass-through rule passes every one.
	rng := rand.New(rand.NewPCG(1, 2))
	var d Decision
	for i := 0; i < 200; i++ {
		s.Decide(syntheticEvent(rng, lanternGrid(), 400, 1), &d)
		if !d.Passed[7] || d.MenuHash != m.Hash || d.PrescaleSet != "nominal" {
			t.Fatalf("event %d: %+v", i, d)
		}
	}
	if c := s.Counts(); c[7].Passed != 200 || c[7].Kept != 0 {
		t.Fatalf("random-keep counts %+v", c[7])
	}
	var b bytes.Buffer
	if err := m.Describe(&b); err != nil {
		t.Fatal(err)
	}
	for _, r := range want {
		if !strings.Contains(b.String(), r) {
			t.Errorf("Describe lacks %s:\n%s", r, b.String())
		}
	}
}

// The complete example of docs/menu.md must parse too.
func TestDocsExampleParses(t *testing.T) {
	doc, err := os.ReadFile("../docs/menu.md")
	if err != nil {
		t.Fatal(err)
	}
	text := string(doc)
	const open = "```yaml\n"
	n := 0
	for {
		i := strings.Index(text, open)
		if i < 0 {
			break
		}
		text = text[i+len(open):]
		j := strings.Index(text, "```")
		block := text[:j]
		text = text[j:]
		if !strings.HasPrefix(block, "menu:") {
			continue // a fragment, not a whole menu
		}
		n++
		if _, err := ParseMenu("docs/menu.md", []byte(block)); err != nil {
			t.Errorf("example %d: %v", n, err)
		}
	}
	if n == 0 {
		t.Fatal("docs/menu.md has no complete example")
	}
}
