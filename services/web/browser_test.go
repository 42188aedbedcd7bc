package web_test

import (
	"net/http/httptest"
	"path/filepath"
	"slices"
	"testing"
	"time"

	"github.com/bunchsieve/bunchsieve/services/web"
	"github.com/bunchsieve/bunchsieve/services/web/webtest"
)

// In a real headless browser the page shows the run, lists the rules, and
// its accept rates and history move as the source's numbers do.
func TestPageInBrowser(t *testing.T) {
	b := webtest.Start(t)
	srv := httptest.NewServer(web.Handler(&fakeRun{}))
	t.Cleanup(srv.Close)
	p := b.Open(t, srv.URL+"/")

	p.WaitFor(t, `document.getElementById("phase").textContent === "flowing"`, 15*time.Second)
	if got := p.Text(t, "#run"); got != "417" {
		t.Errorf("run shows %q, want 417", got)
	}
	if got := p.Text(t, "#prescale-set"); got != "nominal" {
		t.Errorf("prescale set shows %q, want nominal", got)
	}
	if got := p.Text(t, "#menu"); got != "lantern-starter" {
		t.Errorf("menu shows %q", got)
	}
	// A note on the last run, shown while the next flows, is not styled
	// as a failure (only the faulted phase is).
	var note struct {
		Hidden      bool   `json:"hidden"`
		Colour      string `json:"colour"`
		FaultColour string `json:"fault_colour"`
	}
	p.Eval(t, `(() => {
		const d = document.getElementById("detail");
		const f = document.createElement("p");
		f.className = "detail fault";
		document.body.appendChild(f);
		const out = {hidden: d.hidden, colour: getComputedStyle(d).color, fault_colour: getComputedStyle(f).color};
		f.remove();
		return out;
	})()`, &note)
	if note.Hidden || note.Colour == note.FaultColour {
		t.Errorf("the note on the last run: %+v, want it shown, not in the colour of a failure", note)
	}
	var names []string
	p.Eval(t, `[...document.querySelectorAll("#rules tbody tr")].map(r => r.querySelector("td.name").textContent)`, &names)
	var want []string
	for _, r := range fakeRules {
		want = append(want, r.name)
	}
	if !slices.Equal(names, want) {
		t.Errorf("rules shown %v, want %v", names, want)
	}
	if got := p.Text(t, `tr[data-rule="dijet-mass-500"] td.ps`); got != "off" {
		t.Errorf("a rule with prescale 0 shows prescale %q, want off", got)
	}

	// The rates on screen change while the page polls: read them, then wait
	// for different ones.
	const rates = `JSON.stringify([document.getElementById("accepted-hz").textContent,
		...[...document.querySelectorAll("#rules td.acc-hz")].map(td => td.textContent)])`
	var first string
	p.Eval(t, rates, &first)
	p.WaitFor(t, rates+` !== `+jsQuote(first), 10*time.Second)
	// Four polls make a visible history line in every sparkline.
	p.WaitFor(t, `[...document.querySelectorAll("svg polyline")].every(l => l.points.numberOfItems >= 4)`, 15*time.Second)

	var grid struct {
		Tiles int      `json:"tiles"`
		Dead  []string `json:"dead"`
		Warn  []string `json:"warn"`
		Note  string   `json:"note"`
	}
	p.Eval(t, `({tiles: document.querySelectorAll("#sources .src").length,
		dead: [...document.querySelectorAll("#sources .src.dead")].map(e => e.dataset.source),
		warn: [...document.querySelectorAll("#sources .src.warn")].map(e => e.dataset.source),
		note: document.getElementById("sources-note").textContent})`, &grid)
	if grid.Tiles != 16 || !slices.Equal(grid.Dead, []string{"7"}) || !slices.Equal(grid.Warn, []string{"11"}) {
		t.Errorf("source grid: %+v, want 16 tiles, 7 silent, 11 with discards", grid)
	}
	if got := p.Text(t, "#lat-p50"); got != "320 µs" {
		t.Errorf("build p50 shows %q, want 320 µs", got)
	}
	if errs := p.Errors(); len(errs) > 0 {
		t.Errorf("the page reported errors: %v", errs)
	}

	shot := filepath.Join(t.ArtifactDir(), "operator-page.png")
	p.Screenshot(t, shot)
	t.Logf("screenshot: %s", shot)
	// A smaller laptop screen: the layout keeps every panel without
	// horizontal scrolling.
	p.Resize(t, 1280, 720)
	var overflow bool
	p.Eval(t, `document.documentElement.scrollWidth > document.documentElement.clientWidth`, &overflow)
	if overflow {
		t.Error("the page scrolls sideways at 1280 x 720")
	}
	small := filepath.Join(t.ArtifactDir(), "operator-page-1280.png")
	p.Screenshot(t, small)
	t.Logf("screenshot: %s", small)
}

func jsQuote(s string) string {
	q := []byte{'"'}
	for _, r := range s {
		switch r {
		case '"', '\\':
			q = append(q, '\\', byte(r))
		case '\n':
			q = append(q, '\\', 'n')
		default:
			q = append(q, string(r)...)
		}
	}
	return string(append(q, '"'))
}
