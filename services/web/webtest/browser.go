// Package webtest drives a real headless Chromium from Go tests, over the
// DevTools protocol on a local websocket, so that pages served by the
// services can be checked as a person would see them: wait until the page
// shows something, read values out of it, take a screenshot.
//
// Start skips the test when no Chromium is installed (Debian's package
// "chromium") and fails it instead when the environment variable
// BUNCHSIEVE_REQUIRE_TOOLS is 1, so that CI cannot pass by skipping.
// BUNCHSIEVE_CHROMIUM names another browser binary.
//
// Typical use:
//
//	b := webtest.Start(t)
//	p := b.Open(t, url)
//	p.WaitFor(t, `document.querySelector("#phase").textContent === "flowing"`, 10*time.Second)
//	p.Screenshot(t, filepath.Join(t.ArtifactDir(), "page.png"))
package webtest

import (
	"bytes"
	"context"
	"encoding/base64"
	"encoding/json"
	"fmt"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"golang.org/x/net/websocket"

	"github.com/bunchsieve/bunchsieve/internal/syncbuf"
	"github.com/bunchsieve/bunchsieve/internal/toolcheck"
)

// Width and Height are the viewport of every page: a common laptop screen.
const (
	Width  = 1440
	Height = 900
)

// flags keep the browser quiet and local: no sandbox (tests may run as
// root), no GPU, no QUIC, no first-run or background traffic of its own.
var flags = []string{
	"--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
	"--disable-background-networking", "--disable-component-update", "--disable-sync",
	"--disable-extensions", "--disable-default-apps", "--mute-audio", "--hide-scrollbars",
	"--remote-debugging-address=127.0.0.1", "--remote-debugging-port=0",
	"--remote-allow-origins=" + origin,
	"--window-size=" + strconv.Itoa(Width) + "," + strconv.Itoa(Height),
}

const origin = "http://127.0.0.1"

// Browser is one headless Chromium process with a fresh profile. It is
// stopped by a t.Cleanup registered in Start.
type Browser struct {
	cmd    *exec.Cmd
	base   string // http://127.0.0.1:PORT of the DevTools endpoint
	stderr *syncbuf.Buffer
	done   chan struct{}
}

// Binary returns the Chromium to use: $BUNCHSIEVE_CHROMIUM, or chromium
// or chromium-browser on PATH; "" if there is none.
func Binary() string {
	if b := os.Getenv("BUNCHSIEVE_CHROMIUM"); b != "" {
		return b
	}
	for _, name := range []string{"chromium", "chromium-browser"} {
		if p, err := exec.LookPath(name); err == nil {
			return p
		}
	}
	return ""
}

// Start launches a headless Chromium for t, or skips t when none is
// installed (fails it when BUNCHSIEVE_REQUIRE_TOOLS=1).
func Start(t testing.TB) *Browser {
	t.Helper()
	bin := Binary()
	if bin == "" {
		msg := "webtest: no chromium on PATH (install Debian's chromium package, or set BUNCHSIEVE_CHROMIUM)"
		toolcheck.Missing(t, msg)
	}
	profile := t.TempDir()
	args := append(append([]string{}, flags...), "--user-data-dir="+profile, "about:blank")
	cmd := exec.Command(bin, args...)
	b := &Browser{cmd: cmd, stderr: &syncbuf.Buffer{Limit: 1 << 20}, done: make(chan struct{})}
	cmd.Stdout = b.stderr
	cmd.Stderr = b.stderr
	setGroup(cmd)
	toolcheck.DieWithParent(cmd)
	if err := cmd.Start(); err != nil {
		t.Fatalf("webtest: start %s: %v", bin, err)
	}
	go func() {
		_ = cmd.Wait()
		close(b.done)
	}()
	t.Cleanup(b.stop)
	// Chromium writes the port it picked into DevToolsActivePort in the
	// profile once the endpoint listens.
	portFile := filepath.Join(profile, "DevToolsActivePort")
	deadline := time.Now().Add(30 * time.Second)
	for {
		if data, err := os.ReadFile(portFile); err == nil {
			if port, _, ok := strings.Cut(string(data), "\n"); ok && port != "" {
				b.base = "http://127.0.0.1:" + strings.TrimSpace(port)
				break
			}
		}
		select {
		case <-b.done:
			t.Fatalf("webtest: chromium exited before it listened:\n%s", b.stderr.String())
		case <-time.After(50 * time.Millisecond):
		}
		if time.Now().After(deadline) {
			t.Fatalf("webtest: chromium did not open its DevTools endpoint within 30 s:\n%s", b.stderr.String())
		}
	}
	return b
}

// Log returns what the browser printed so far, for failure messages.
func (b *Browser) Log() string { return b.stderr.String() }

func (b *Browser) stop() {
	select {
	case <-b.done:
		return
	default:
	}
	signalGroup(b.cmd, false)
	select {
	case <-b.done:
	case <-time.After(5 * time.Second):
		signalGroup(b.cmd, true)
		<-b.done
	}
}

type target struct {
	ID                   string `json:"id"`
	Type                 string `json:"type"`
	URL                  string `json:"url"`
	WebSocketDebuggerURL string `json:"webSocketDebuggerUrl"`
}

// Open opens url in a new tab at the laptop viewport, waits until the
// document has loaded, and returns the page. The page is closed by a
// t.Cleanup.
func (b *Browser) Open(t testing.TB, url string) *Page {
	t.Helper()
	req, err := http.NewRequest(http.MethodPut, b.base+"/json/new?about:blank", nil)
	if err != nil {
		t.Fatal(err)
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatalf("webtest: new tab: %v", err)
	}
	var tg target
	err = json.NewDecoder(resp.Body).Decode(&tg)
	resp.Body.Close()
	if err != nil || tg.WebSocketDebuggerURL == "" {
		t.Fatalf("webtest: new tab: %s %v", resp.Status, err)
	}
	p, err := dial(tg.WebSocketDebuggerURL)
	if err != nil {
		t.Fatalf("webtest: %v\n%s", err, b.Log())
	}
	p.browser = b
	t.Cleanup(func() {
		p.close()
		if r, err := http.Get(b.base + "/json/close/" + tg.ID); err == nil {
			r.Body.Close()
		}
	})
	for _, c := range []struct {
		method string
		params any
	}{
		{"Page.enable", nil},
		{"Runtime.enable", nil},
		{"Log.enable", nil},
		{"Emulation.setDeviceMetricsOverride", map[string]any{"width": Width, "height": Height, "deviceScaleFactor": 1, "mobile": false}},
	} {
		if _, err := p.call(c.method, c.params); err != nil {
			t.Fatalf("webtest: %s: %v", c.method, err)
		}
	}
	p.Navigate(t, url)
	return p
}

// Page is one browser tab. Its methods fail the test on error; they are
// safe to call from one goroutine at a time.
type Page struct {
	browser *Browser
	ws      *websocket.Conn

	mu      sync.Mutex
	next    int64
	waiting map[int64]chan reply
	errors  []string
	closed  chan struct{}
}

type reply struct {
	Result json.RawMessage `json:"result"`
	Error  *struct {
		Code    int    `json:"code"`
		Message string `json:"message"`
	} `json:"error"`
}

type message struct {
	ID     int64           `json:"id"`
	Method string          `json:"method"`
	Params json.RawMessage `json:"params"`
	reply
}

func dial(wsURL string) (*Page, error) {
	cfg, err := websocket.NewConfig(wsURL, origin)
	if err != nil {
		return nil, err
	}
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	ws, err := cfg.DialContext(ctx)
	if err != nil {
		return nil, fmt.Errorf("devtools websocket %s: %w", wsURL, err)
	}
	ws.MaxPayloadBytes = 64 << 20 // screenshots arrive as one base64 frame
	p := &Page{ws: ws, waiting: map[int64]chan reply{}, closed: make(chan struct{})}
	go p.read()
	return p, nil
}

func (p *Page) read() {
	defer close(p.closed)
	for {
		var data []byte
		if err := websocket.Message.Receive(p.ws, &data); err != nil {
			return
		}
		var m message
		if err := json.Unmarshal(data, &m); err != nil {
			continue
		}
		if m.Method != "" {
			p.event(m.Method, m.Params)
			continue
		}
		p.mu.Lock()
		ch := p.waiting[m.ID]
		delete(p.waiting, m.ID)
		p.mu.Unlock()
		if ch != nil {
			ch <- m.reply
		}
	}
}

// event records script errors and console errors of the page.
func (p *Page) event(method string, params json.RawMessage) {
	var text string
	switch method {
	case "Runtime.exceptionThrown":
		var e struct {
			ExceptionDetails struct {
				Text      string `json:"text"`
				URL       string `json:"url"`
				Line      int    `json:"lineNumber"`
				Exception struct {
					Description string `json:"description"`
				} `json:"exception"`
			} `json:"exceptionDetails"`
		}
		_ = json.Unmarshal(params, &e)
		d := e.ExceptionDetails
		text = fmt.Sprintf("exception at %s:%d: %s %s", d.URL, d.Line+1, d.Text, d.Exception.Description)
	case "Runtime.consoleAPICalled":
		var e struct {
			Type string `json:"type"`
			Args []struct {
				Value       any    `json:"value"`
				Description string `json:"description"`
			} `json:"args"`
		}
		_ = json.Unmarshal(params, &e)
		if e.Type != "error" && e.Type != "assert" {
			return
		}
		var parts []string
		for _, a := range e.Args {
			if a.Description != "" {
				parts = append(parts, a.Description)
			} else {
				parts = append(parts, fmt.Sprint(a.Value))
			}
		}
		text = "console." + e.Type + ": " + strings.Join(parts, " ")
	case "Log.entryAdded":
		var e struct {
			Entry struct {
				Level  string `json:"level"`
				Source string `json:"source"`
				Text   string `json:"text"`
				URL    string `json:"url"`
			} `json:"entry"`
		}
		_ = json.Unmarshal(params, &e)
		if e.Entry.Level != "error" {
			return
		}
		text = e.Entry.Source + " error: " + e.Entry.Text + " " + e.Entry.URL
	default:
		return
	}
	p.mu.Lock()
	p.errors = append(p.errors, text)
	p.mu.Unlock()
}

func (p *Page) call(method string, params any) (json.RawMessage, error) {
	p.mu.Lock()
	p.next++
	id := p.next
	ch := make(chan reply, 1)
	p.waiting[id] = ch
	p.mu.Unlock()
	msg := map[string]any{"id": id, "method": method}
	if params != nil {
		msg["params"] = params
	}
	data, err := json.Marshal(msg)
	if err != nil {
		return nil, err
	}
	if err := websocket.Message.Send(p.ws, string(data)); err != nil {
		return nil, fmt.Errorf("%s: send: %w", method, err)
	}
	select {
	case r := <-ch:
		if r.Error != nil {
			return nil, fmt.Errorf("%s: %s (code %d)", method, r.Error.Message, r.Error.Code)
		}
		return r.Result, nil
	case <-p.closed:
		return nil, fmt.Errorf("%s: devtools connection closed", method)
	case <-time.After(30 * time.Second):
		return nil, fmt.Errorf("%s: no answer within 30 s", method)
	}
}

func (p *Page) close() {
	_ = p.ws.Close()
	<-p.closed
}

// Resize sets the page's viewport to w x h CSS pixels.
func (p *Page) Resize(t testing.TB, w, h int) {
	t.Helper()
	if _, err := p.call("Emulation.setDeviceMetricsOverride", map[string]any{"width": w, "height": h, "deviceScaleFactor": 1, "mobile": false}); err != nil {
		t.Fatalf("webtest: %v", err)
	}
}

// Navigate loads url and waits until the document is complete.
func (p *Page) Navigate(t testing.TB, url string) {
	t.Helper()
	res, err := p.call("Page.navigate", map[string]any{"url": url})
	if err != nil {
		t.Fatalf("webtest: %v", err)
	}
	var nav struct {
		ErrorText string `json:"errorText"`
	}
	_ = json.Unmarshal(res, &nav)
	if nav.ErrorText != "" {
		t.Fatalf("webtest: navigate to %s: %s", url, nav.ErrorText)
	}
	p.WaitFor(t, `document.readyState === "complete" && location.href !== "about:blank"`, 15*time.Second)
}

// Eval evaluates the JavaScript expression expr in the page (awaiting it if
// it is a promise) and decodes its JSON value into out, which may be nil.
func (p *Page) Eval(t testing.TB, expr string, out any) {
	t.Helper()
	if err := p.eval(expr, out); err != nil {
		t.Fatalf("webtest: %v", err)
	}
}

func (p *Page) eval(expr string, out any) error {
	res, err := p.call("Runtime.evaluate", map[string]any{"expression": expr, "returnByValue": true, "awaitPromise": true})
	if err != nil {
		return err
	}
	var r struct {
		Result struct {
			Type  string          `json:"type"`
			Value json.RawMessage `json:"value"`
		} `json:"result"`
		ExceptionDetails *struct {
			Text      string `json:"text"`
			Exception struct {
				Description string `json:"description"`
			} `json:"exception"`
		} `json:"exceptionDetails"`
	}
	if err := json.Unmarshal(res, &r); err != nil {
		return fmt.Errorf("evaluate %q: %w", expr, err)
	}
	if e := r.ExceptionDetails; e != nil {
		return fmt.Errorf("evaluate %q: %s %s", expr, e.Text, e.Exception.Description)
	}
	if out == nil || r.Result.Type == "undefined" {
		return nil
	}
	if err := json.Unmarshal(r.Result.Value, out); err != nil {
		return fmt.Errorf("evaluate %q: value %s: %w", expr, r.Result.Value, err)
	}
	return nil
}

// WaitFor polls the JavaScript expression cond every 50 ms until it is
// true, and fails the test if it is not within timeout.
func (p *Page) WaitFor(t testing.TB, cond string, timeout time.Duration) {
	t.Helper()
	deadline := time.Now().Add(timeout)
	var lastErr error
	for {
		var ok bool
		lastErr = p.eval("Boolean("+cond+")", &ok)
		if lastErr == nil && ok {
			return
		}
		if time.Now().After(deadline) {
			if lastErr != nil {
				t.Fatalf("webtest: waiting for %s: %v", cond, lastErr)
			}
			t.Fatalf("webtest: %s not true within %v; page errors: %v", cond, timeout, p.Errors())
		}
		time.Sleep(50 * time.Millisecond)
	}
}

// Text returns the text content of the first element matching the CSS
// selector sel, failing the test if there is none.
func (p *Page) Text(t testing.TB, sel string) string {
	t.Helper()
	var s *string
	p.Eval(t, `(() => { const e = document.querySelector(`+jsString(sel)+`); return e ? e.textContent : null; })()`, &s)
	if s == nil {
		t.Fatalf("webtest: no element matches %s", sel)
	}
	return *s
}

// Screenshot saves a PNG of the viewport to path.
func (p *Page) Screenshot(t testing.TB, path string) {
	t.Helper()
	res, err := p.call("Page.captureScreenshot", map[string]any{"format": "png"})
	if err != nil {
		t.Fatalf("webtest: %v", err)
	}
	var shot struct {
		Data string `json:"data"`
	}
	if err := json.Unmarshal(res, &shot); err != nil {
		t.Fatalf("webtest: screenshot: %v", err)
	}
	png, err := base64.StdEncoding.DecodeString(shot.Data)
	if err != nil || !bytes.HasPrefix(png, []byte("\x89PNG")) {
		t.Fatalf("webtest: screenshot is not a PNG: %v", err)
	}
	if err := os.WriteFile(path, png, 0o644); err != nil {
		t.Fatal(err)
	}
}

// Errors returns the script exceptions, console errors and browser errors
// (failed loads, refused by the content policy, ...) the page has reported
// since it was opened.
func (p *Page) Errors() []string {
	p.mu.Lock()
	defer p.mu.Unlock()
	return append([]string(nil), p.errors...)
}

func jsString(s string) string {
	b, _ := json.Marshal(s)
	return string(b)
}
