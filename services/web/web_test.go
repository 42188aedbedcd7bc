package web_test

import (
	"bytes"
	"encoding/json"
	"flag"
	"io"
	"io/fs"
	"math"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"github.com/bunchsieve/bunchsieve/services/web"
)

var update = flag.Bool("update", false, "rewrite testdata/status.golden.json")

func get(t *testing.T, h http.Handler, method, path string) *httptest.ResponseRecorder {
	t.Helper()
	rec := httptest.NewRecorder()
	h.ServeHTTP(rec, httptest.NewRequest(method, path, nil))
	return rec
}

// fixed is a snapshot with every field set, for the wire-shape golden file.
func fixed() web.Snapshot {
	return web.Snapshot{
		Phase: web.PhaseDraining, Detail: "offering stopped; 412 crossings in flight", Run: 12, LumiSlice: 7,
		PrescaleSet: "quiet", Menu: "lantern-starter", MenuHash: "5c6cab9fe4ed60f1", UptimeS: 93.5,
		CrossingsHz: 5000, BuiltHz: 4987.5, AcceptedHz: 13.25, IncompleteFraction: 0.0025,
		BuildLatencyP50S: 0.00032, BuildLatencyP90S: 0.0009, BuildLatencyP99S: 0.0021, EndToEndP99S: 0.0038,
		Rules: []web.RuleStatus{
			{Name: "met-120", Prescale: 1, PassedHz: 2.5, AcceptedHz: 2.5, Passed: 230, Accepted: 230},
			{Name: "random-keep", Prescale: 0, PassedHz: 5000, AcceptedHz: 0, Passed: 460000, Accepted: 0},
		},
		Sources: []web.SourceHealth{{ID: 1, Alive: true, Received: 460000}, {ID: 2, Alive: false, Received: 1200, Discarded: 3}},
	}
}

// /api/status serves the Snapshot in the documented JSON shape; the golden
// file pins the field names scripts and the page rely on.
func TestStatusJSONShape(t *testing.T) {
	h := web.Handler(web.SourceFunc(fixed))
	rec := get(t, h, http.MethodGet, "/api/status")
	if rec.Code != http.StatusOK {
		t.Fatalf("GET /api/status: %d %s", rec.Code, rec.Body)
	}
	if ct := rec.Header().Get("Content-Type"); ct != "application/json" {
		t.Errorf("Content-Type %q, want application/json", ct)
	}
	if cc := rec.Header().Get("Cache-Control"); cc != "no-store" {
		t.Errorf("Cache-Control %q, want no-store", cc)
	}
	var pretty bytes.Buffer
	if err := json.Indent(&pretty, rec.Body.Bytes(), "", "  "); err != nil {
		t.Fatalf("status is not JSON: %v\n%s", err, rec.Body)
	}
	pretty.WriteByte('\n')
	golden := filepath.Join("testdata", "status.golden.json")
	if *update {
		if err := os.WriteFile(golden, pretty.Bytes(), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(golden)
	if err != nil {
		t.Fatalf("%v (run go test -update to create it)", err)
	}
	if !bytes.Equal(pretty.Bytes(), want) {
		t.Errorf("status JSON differs from %s (go test -update rewrites it):\n got: %s\nwant: %s", golden, pretty.Bytes(), want)
	}
	var back web.Snapshot
	if err := json.Unmarshal(rec.Body.Bytes(), &back); err != nil {
		t.Fatal(err)
	}
	if b, f := mustJSON(t, back), mustJSON(t, fixed()); b != f {
		t.Errorf("round trip changed the snapshot:\n got %s\nwant %s", b, f)
	}
}

func mustJSON(t *testing.T, v any) string {
	t.Helper()
	b, err := json.Marshal(v)
	if err != nil {
		t.Fatal(err)
	}
	return string(b)
}

// A producer's empty lists and non-finite rates still give JSON the page
// can read: [] rather than null, 0 rather than an encoding error.
func TestStatusCleansSnapshot(t *testing.T) {
	h := web.Handler(web.SourceFunc(func() web.Snapshot {
		return web.Snapshot{Phase: web.PhaseIdle, AcceptedHz: math.NaN(), BuildLatencyP99S: math.Inf(1),
			Rules: []web.RuleStatus{{Name: "r", PassedHz: math.Inf(-1)}}}
	}))
	rec := get(t, h, http.MethodGet, "/api/status")
	if rec.Code != http.StatusOK {
		t.Fatalf("GET /api/status: %d %s", rec.Code, rec.Body)
	}
	var m map[string]any
	if err := json.Unmarshal(rec.Body.Bytes(), &m); err != nil {
		t.Fatal(err)
	}
	if src, ok := m["sources"].([]any); !ok || len(src) != 0 {
		t.Errorf("sources = %#v, want []", m["sources"])
	}
	if m["accepted_hz"] != 0.0 || m["build_latency_p99_s"] != 0.0 {
		t.Errorf("non-finite values served as %v, %v; want 0", m["accepted_hz"], m["build_latency_p99_s"])
	}
	if r := m["rules"].([]any)[0].(map[string]any); r["passed_hz"] != 0.0 {
		t.Errorf("rule passed_hz %v, want 0", r["passed_hz"])
	}
	empty := get(t, web.Handler(web.SourceFunc(func() web.Snapshot { return web.Snapshot{} })), http.MethodGet, "/api/status")
	if !strings.Contains(empty.Body.String(), `"rules":[]`) || !strings.Contains(empty.Body.String(), `"sources":[]`) {
		t.Errorf("empty snapshot: %s, want rules and sources as []", empty.Body)
	}
}

// The page and every asset it references are served with the right
// content types and the content policy that forbids other origins.
func TestPageAndAssets(t *testing.T) {
	h := web.Handler(&fakeRun{})
	rec := get(t, h, http.MethodGet, "/")
	if rec.Code != http.StatusOK {
		t.Fatalf("GET /: %d", rec.Code)
	}
	if ct := rec.Header().Get("Content-Type"); ct != "text/html; charset=utf-8" {
		t.Errorf("GET / Content-Type %q", ct)
	}
	csp := rec.Header().Get("Content-Security-Policy")
	if !strings.Contains(csp, "default-src 'none'") || !strings.Contains(csp, "connect-src 'self'") {
		t.Errorf("Content-Security-Policy %q does not lock the page to its origin", csp)
	}
	page := rec.Body.String()
	refs := regexp.MustCompile(`(?:src|href)="([^"]+)"`).FindAllStringSubmatch(page, -1)
	if len(refs) < 3 {
		t.Fatalf("page references %d assets, want the script, the stylesheet and the icon", len(refs))
	}
	wantType := map[string]string{".js": "text/javascript; charset=utf-8", ".css": "text/css; charset=utf-8", ".svg": "image/svg+xml"}
	for _, ref := range refs {
		u := ref[1]
		if !strings.HasPrefix(u, "assets/") {
			t.Errorf("page references %q: want a relative assets/ path", u)
			continue
		}
		a := get(t, h, http.MethodGet, "/"+u)
		if a.Code != http.StatusOK {
			t.Errorf("GET /%s: %d", u, a.Code)
			continue
		}
		if want := wantType[filepath.Ext(u)]; a.Header().Get("Content-Type") != want {
			t.Errorf("GET /%s: Content-Type %q, want %q", u, a.Header().Get("Content-Type"), want)
		}
		if a.Header().Get("X-Content-Type-Options") != "nosniff" {
			t.Errorf("GET /%s: no nosniff header", u)
		}
	}
	for _, id := range []string{"phase", "run", "lumi-slice", "prescale-set", "menu", "menu-hash", "uptime",
		"crossings-hz", "built-hz", "accepted-hz", "incomplete", "rules", "lat-p50", "lat-p90", "lat-p99", "e2e-p99", "sources"} {
		if !strings.Contains(page, `id="`+id+`"`) {
			t.Errorf("page has no element #%s", id)
		}
	}
}

func TestRoutes(t *testing.T) {
	h := web.Handler(&fakeRun{})
	for _, c := range []struct {
		method, path string
		code         int
	}{
		{http.MethodHead, "/", http.StatusOK},
		{http.MethodHead, "/api/status", http.StatusOK},
		{http.MethodPost, "/api/status", http.StatusMethodNotAllowed},
		{http.MethodPut, "/", http.StatusMethodNotAllowed},
		{http.MethodGet, "/index.html", http.StatusNotFound},
		{http.MethodGet, "/api/other", http.StatusNotFound},
		{http.MethodGet, "/assets/missing.js", http.StatusNotFound},
	} {
		if got := get(t, h, c.method, c.path).Code; got != c.code {
			t.Errorf("%s %s: %d, want %d", c.method, c.path, got, c.code)
		}
	}
	// Mounted under a prefix, the relative URLs of the page still resolve.
	mux := http.NewServeMux()
	mux.Handle("/ops/", http.StripPrefix("/ops", web.Handler(&fakeRun{})))
	srv := httptest.NewServer(mux)
	defer srv.Close()
	for _, p := range []string{"/ops/", "/ops/api/status", "/ops/assets/app.js"} {
		resp, err := http.Get(srv.URL + p)
		if err != nil {
			t.Fatal(err)
		}
		_, _ = io.Copy(io.Discard, resp.Body)
		resp.Body.Close()
		if resp.StatusCode != http.StatusOK {
			t.Errorf("GET %s under a prefix: %s", p, resp.Status)
		}
	}
}

func TestHandlerNilSourcePanics(t *testing.T) {
	defer func() {
		if recover() == nil {
			t.Error("Handler(nil) did not panic")
		}
	}()
	web.Handler(nil)
}

// Nothing in the embedded assets loads from another origin: the page must
// work on a machine without network access.
func TestAssetsAreSelfContained(t *testing.T) {
	h := web.Handler(&fakeRun{})
	// The only absolute URL allowed is the SVG namespace name, which is an
	// identifier and never fetched.
	absolute := regexp.MustCompile(`(?i)\b(?:https?|wss?|ftp):\/\/[^\s"'()<>]+`)
	relativeToOrigin := regexp.MustCompile(`(?i)(?:src|href|action)\s*=\s*["']?\s*//|url\(\s*["']?\s*//|@import`)
	files := []string{"/", "/assets/app.js", "/assets/style.css", "/assets/icon.svg"}
	seen := 0
	for _, f := range files {
		body := get(t, h, http.MethodGet, f).Body.String()
		if body == "" {
			t.Fatalf("GET %s: empty", f)
		}
		seen++
		for _, u := range absolute.FindAllString(body, -1) {
			if u != "http://www.w3.org/2000/svg" {
				t.Errorf("%s refers to %s", f, u)
			}
		}
		if m := relativeToOrigin.FindString(body); m != "" {
			t.Errorf("%s loads from another origin or imports: %q", f, m)
		}
	}
	// Every embedded file was looked at.
	n := 0
	_ = fs.WalkDir(os.DirFS("assets"), ".", func(_ string, d fs.DirEntry, _ error) error {
		if d != nil && !d.IsDir() {
			n++
		}
		return nil
	})
	if n != seen {
		t.Errorf("assets/ holds %d files, the test checked %d: add the new ones to the list", n, seen)
	}
}
