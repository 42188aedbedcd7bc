package stack

import (
	"bufio"
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"net/http"
	"os"
	"regexp"
	"slices"
	"sort"
	"strings"
	"testing"

	"github.com/prometheus/client_golang/prometheus/testutil/promlint"
	dto "github.com/prometheus/client_model/go"
	"github.com/prometheus/common/expfmt"

	"github.com/bunchsieve/bunchsieve/services/runconfig"
)

// catalogue is the metrics catalogue the stack's /metrics is checked
// against.
const catalogue = "../../docs/metrics.md"

// documented is one row of the catalogue's series tables.
type documented struct {
	typ    string   // counter, gauge, histogram
	labels []string // sorted label names
	line   int
}

// The stack's /metrics passes promlint, every histogram carries native
// buckets, and docs/metrics.md lists exactly the bunchsieve_ series the
// stack exports, with their types and label names.
func TestMetricsMatchCatalogue(t *testing.T) {
	st, err := New(Options{Run: runconfig.Default(), Crossings: 3000, MetricsAddr: "127.0.0.1:0"})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(st.Close)
	sum, err := st.Run(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	// The HTTP server keeps serving after Run until Close, so the scrape
	// sees the final counts.
	text := scrape(t, st.MetricsURL(), "")
	problems, err := promlint.New(bytes.NewReader(text)).Lint()
	if err != nil {
		t.Fatalf("promlint could not parse /metrics: %v", err)
	}
	for _, p := range problems {
		t.Errorf("promlint: %s: %s", p.Metric, p.Text)
	}

	fams := scrapeFamilies(t, st.MetricsURL())
	exported := map[string]documented{}
	for name, mf := range fams {
		if !strings.HasPrefix(name, "bunchsieve_") {
			continue
		}
		exported[name] = documented{typ: strings.ToLower(mf.GetType().String()), labels: labelNames(mf)}
		if mf.GetType() == dto.MetricType_HISTOGRAM {
			for _, m := range mf.GetMetric() {
				if h := m.GetHistogram(); h.Schema == nil || h.ZeroThreshold == nil {
					t.Errorf("%s: no native histogram buckets", name)
				}
			}
		}
	}
	if len(exported) == 0 {
		t.Fatal("the stack exports no bunchsieve_ series")
	}
	docs := parseCatalogue(t, catalogue)
	for _, name := range sortedKeys(exported) {
		e := exported[name]
		d, ok := docs[name]
		if !ok {
			t.Errorf("%s (%s, labels %v) is exported but not listed in %s", name, e.typ, e.labels, catalogue)
			continue
		}
		if d.typ != e.typ {
			t.Errorf("%s:%d: %s is listed as a %s but exported as a %s", catalogue, d.line, name, d.typ, e.typ)
		}
		if !slices.Equal(d.labels, e.labels) {
			t.Errorf("%s:%d: %s is listed with labels %v but exported with %v", catalogue, d.line, name, d.labels, e.labels)
		}
	}
	for _, name := range sortedKeys(docs) {
		if _, ok := exported[name]; !ok {
			t.Errorf("%s:%d: %s is listed but the stack does not export it", catalogue, docs[name].line, name)
		}
	}

	// The exported values are the stack's own counts.
	if got := counterValue(fams, "bunchsieve_readout_crossings_total", nil); got != float64(sum.Crossings) {
		t.Errorf("bunchsieve_readout_crossings_total = %v, summary has %d crossings", got, sum.Crossings)
	}
	if got := counterValue(fams, "bunchsieve_selection_decisions_total", nil); got != float64(sum.EventsDecided) {
		t.Errorf("bunchsieve_selection_decisions_total = %v, summary decided %d", got, sum.EventsDecided)
	}
	for _, r := range sum.Rules {
		l := map[string]string{"rule": r.Name}
		if got := counterValue(fams, "bunchsieve_selection_rule_passed_total", l); got != float64(r.Passed) {
			t.Errorf("rule %s: passed_total = %v, summary %d", r.Name, got, r.Passed)
		}
		if got := counterValue(fams, "bunchsieve_selection_rule_accepted_total", l); got != float64(r.Accepted) {
			t.Errorf("rule %s: accepted_total = %v, summary %d", r.Name, got, r.Accepted)
		}
	}
}

// The catalogue parser reads the table layout the document uses, and
// refuses a row it cannot read instead of skipping it.
func TestParseCatalogueRows(t *testing.T) {
	dir := t.TempDir()
	path := dir + "/m.md"
	doc := "intro\n\n| series | type | unit | labels | meaning |\n|---|---|---|---|---|\n" +
		"| `bunchsieve_a_total` | counter | events | `rule`, `builder` | a |\n" +
		"| `bunchsieve_b` | gauge | 1 | - | b |\n" +
		"| `source` | ids | builder series |\n"
	if err := os.WriteFile(path, []byte(doc), 0o644); err != nil {
		t.Fatal(err)
	}
	got, err := readCatalogue(path)
	if err != nil {
		t.Fatal(err)
	}
	want := map[string]documented{
		"bunchsieve_a_total": {typ: "counter", labels: []string{"builder", "rule"}, line: 5},
		"bunchsieve_b":       {typ: "gauge", labels: nil, line: 6},
	}
	if len(got) != len(want) {
		t.Fatalf("parsed %v, want %v", got, want)
	}
	for k, w := range want {
		g := got[k]
		if g.typ != w.typ || !slices.Equal(g.labels, w.labels) || g.line != w.line {
			t.Errorf("%s: parsed %+v, want %+v", k, g, w)
		}
	}
	bad := "| `bunchsieve_c_total` | counter |\n"
	if err := os.WriteFile(path, []byte(bad), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := readCatalogue(path); err == nil {
		t.Error("a series row with two cells parsed without error")
	}
}

func scrape(t *testing.T, url, accept string) []byte {
	t.Helper()
	req, err := http.NewRequest(http.MethodGet, url, nil)
	if err != nil {
		t.Fatal(err)
	}
	if accept != "" {
		req.Header.Set("Accept", accept)
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	body, err := io.ReadAll(resp.Body)
	if err != nil || resp.StatusCode != http.StatusOK {
		t.Fatalf("GET %s: %s %v", url, resp.Status, err)
	}
	return body
}

// scrapeFamilies scrapes url in the protobuf format, which carries the
// native histogram buckets the text format leaves out.
func scrapeFamilies(t *testing.T, url string) map[string]*dto.MetricFamily {
	t.Helper()
	req, err := http.NewRequest(http.MethodGet, url, nil)
	if err != nil {
		t.Fatal(err)
	}
	req.Header.Set("Accept", string(expfmt.NewFormat(expfmt.TypeProtoDelim)))
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	if f := expfmt.ResponseFormat(resp.Header); f.FormatType() != expfmt.TypeProtoDelim {
		t.Fatalf("asked for protobuf, got %q", f)
	}
	dec := expfmt.NewDecoder(resp.Body, expfmt.ResponseFormat(resp.Header))
	out := map[string]*dto.MetricFamily{}
	for {
		mf := &dto.MetricFamily{}
		if err := dec.Decode(mf); errors.Is(err, io.EOF) {
			return out
		} else if err != nil {
			t.Fatalf("decode /metrics: %v", err)
		}
		out[mf.GetName()] = mf
	}
}

// labelNames returns the sorted label names used by any series of mf.
func labelNames(mf *dto.MetricFamily) []string {
	set := map[string]bool{}
	for _, m := range mf.GetMetric() {
		for _, lp := range m.GetLabel() {
			set[lp.GetName()] = true
		}
	}
	if len(set) == 0 {
		return nil
	}
	return sortedKeys(set)
}

func counterValue(fams map[string]*dto.MetricFamily, name string, labels map[string]string) float64 {
	mf := fams[name]
	total := 0.0
	for _, m := range mf.GetMetric() {
		match := true
		for _, lp := range m.GetLabel() {
			if v, ok := labels[lp.GetName()]; ok && v != lp.GetValue() {
				match = false
			}
		}
		if match {
			total += m.GetCounter().GetValue()
		}
	}
	return total
}

func parseCatalogue(t *testing.T, path string) map[string]documented {
	t.Helper()
	docs, err := readCatalogue(path)
	if err != nil {
		t.Fatal(err)
	}
	if len(docs) == 0 {
		t.Fatalf("%s: no series rows found", path)
	}
	return docs
}

var (
	seriesCell = regexp.MustCompile("^`(bunchsieve_[a-z0-9_]+)`$")
	labelToken = regexp.MustCompile("`([a-zA-Z_][a-zA-Z0-9_]*)`")
)

// readCatalogue reads the rows "| `name` | type | unit | labels | meaning |"
// of every table in a markdown file.
func readCatalogue(path string) (map[string]documented, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	out := map[string]documented{}
	sc := bufio.NewScanner(f)
	for n := 1; sc.Scan(); n++ {
		line := strings.TrimSpace(sc.Text())
		if !strings.HasPrefix(line, "|") {
			continue
		}
		cells := strings.Split(strings.Trim(line, "|"), "|")
		for i := range cells {
			cells[i] = strings.TrimSpace(cells[i])
		}
		m := seriesCell.FindStringSubmatch(cells[0])
		if m == nil {
			continue
		}
		if len(cells) < 5 {
			return nil, fmt.Errorf("%s:%d: a series row needs 5 cells: series, type, unit, labels, meaning", path, n)
		}
		if _, dup := out[m[1]]; dup {
			return nil, fmt.Errorf("%s:%d: %s listed twice", path, n, m[1])
		}
		d := documented{typ: cells[1], line: n}
		for _, lm := range labelToken.FindAllStringSubmatch(cells[3], -1) {
			d.labels = append(d.labels, lm[1])
		}
		sort.Strings(d.labels)
		out[m[1]] = d
	}
	return out, sc.Err()
}

func sortedKeys[V any](m map[string]V) []string {
	out := make([]string, 0, len(m))
	for k := range m {
		out = append(out, k)
	}
	sort.Strings(out)
	return out
}
