package deploy_test

import (
	"bufio"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"regexp"
	"sort"
	"strings"
	"testing"

	dto "github.com/prometheus/client_model/go"
	"github.com/prometheus/prometheus/model/labels"
	"github.com/prometheus/prometheus/promql/parser"
	"go.yaml.in/yaml/v3"
)

// ruleFile is the layout of a Prometheus rule file.
type ruleFile struct {
	Groups []struct {
		Name  string `yaml:"name"`
		Rules []struct {
			Record      string            `yaml:"record"`
			Alert       string            `yaml:"alert"`
			Expr        string            `yaml:"expr"`
			For         string            `yaml:"for"`
			Labels      map[string]string `yaml:"labels"`
			Annotations map[string]string `yaml:"annotations"`
		} `yaml:"rules"`
	} `yaml:"groups"`
}

// query is one PromQL expression found in a deployment file.
type query struct {
	where string // file and rule or panel, for messages
	expr  string
}

func ruleFiles(t *testing.T) []string {
	t.Helper()
	files, err := filepath.Glob("*.rules.yml")
	if err != nil || len(files) == 0 {
		t.Fatalf("no *.rules.yml in deploy/: %v", err)
	}
	return files
}

// loadRules returns every rule expression and the names of the recorded
// series.
func loadRules(t *testing.T) (queries []query, recorded []string) {
	t.Helper()
	for _, f := range ruleFiles(t) {
		data, err := os.ReadFile(f)
		if err != nil {
			t.Fatal(err)
		}
		var rf ruleFile
		dec := yaml.NewDecoder(strings.NewReader(string(data)))
		dec.KnownFields(true)
		if err := dec.Decode(&rf); err != nil {
			t.Fatalf("%s: %v", f, err)
		}
		for _, g := range rf.Groups {
			for _, r := range g.Rules {
				name := r.Record
				if r.Alert != "" {
					name = "alert " + r.Alert
				} else {
					recorded = append(recorded, r.Record)
				}
				queries = append(queries, query{where: f + ": " + name, expr: r.Expr})
			}
		}
	}
	return queries, recorded
}

// dashboard is the part of a Grafana dashboard the checks read.
type dashboard struct {
	UID        string  `json:"uid"`
	Title      string  `json:"title"`
	Panels     []panel `json:"panels"`
	Templating struct {
		List []struct {
			Name       string `json:"name"`
			Type       string `json:"type"`
			Definition string `json:"definition"`
		} `json:"list"`
	} `json:"templating"`
}

type panel struct {
	ID      int     `json:"id"`
	Type    string  `json:"type"`
	Title   string  `json:"title"`
	Panels  []panel `json:"panels"` // collapsed rows
	GridPos struct {
		X, Y, W, H int
	} `json:"gridPos"`
	Targets []struct {
		RefID string `json:"refId"`
		Expr  string `json:"expr"`
	} `json:"targets"`
}

func dashboards(t *testing.T) map[string]dashboard {
	t.Helper()
	files, err := filepath.Glob("grafana/*.json")
	if err != nil || len(files) == 0 {
		t.Fatalf("no grafana/*.json in deploy/: %v", err)
	}
	out := map[string]dashboard{}
	for _, f := range files {
		data, err := os.ReadFile(f)
		if err != nil {
			t.Fatal(err)
		}
		var d dashboard
		if err := json.Unmarshal(data, &d); err != nil {
			t.Fatalf("%s: %v", f, err)
		}
		out[f] = d
	}
	return out
}

func allPanels(ps []panel) []panel {
	var out []panel
	for _, p := range ps {
		out = append(out, p)
		out = append(out, allPanels(p.Panels)...)
	}
	return out
}

// grafanaVar matches $name, ${name} and ${name:format}.
var grafanaVar = regexp.MustCompile(`\$\{([A-Za-z0-9_]+)(?::[a-z]+)?\}|\$([A-Za-z0-9_]+)`)

// grafanaBuiltins are the variables Grafana itself defines, with a value
// that keeps the expression meaningful for the parser.
var grafanaBuiltins = map[string]string{
	"__rate_interval": "1m", "__interval": "1m", "__range": "1h", "__range_s": "3600", "__interval_ms": "60000",
}

// expandGrafana replaces Grafana variables: built-ins by a sample value,
// the dashboard's own (all used inside label-matcher strings) by a regex
// matching anything. It returns the names of unknown variables.
func expandGrafana(expr string, defined map[string]bool) (string, []string) {
	var unknown []string
	out := grafanaVar.ReplaceAllStringFunc(expr, func(m string) string {
		sm := grafanaVar.FindStringSubmatch(m)
		name := sm[1] + sm[2]
		if v, ok := grafanaBuiltins[name]; ok {
			return v
		}
		if !defined[name] {
			unknown = append(unknown, name)
		}
		return ".*"
	})
	return out, unknown
}

func dashboardQueries(t *testing.T) []query {
	t.Helper()
	var out []query
	for f, d := range dashboards(t) {
		defined := map[string]bool{}
		for _, v := range d.Templating.List {
			defined[v.Name] = true
		}
		n := 0
		for _, p := range allPanels(d.Panels) {
			for _, tg := range p.Targets {
				expr, unknown := expandGrafana(tg.Expr, defined)
				if len(unknown) > 0 {
					t.Errorf("%s: panel %q target %s uses undefined variables %v", f, p.Title, tg.RefID, unknown)
				}
				out = append(out, query{where: fmt.Sprintf("%s: panel %q target %s", f, p.Title, tg.RefID), expr: expr})
				n++
			}
		}
		if n == 0 {
			t.Errorf("%s has no queries", f)
		}
	}
	return out
}

type selector struct {
	name     string
	matchers []*labels.Matcher
	rate     string // the range function applied to it, if any
}

// selectors parses expr and returns its vector selectors.
func selectors(expr string) ([]selector, error) {
	e, err := parser.NewParser(parser.Options{}).ParseExpr(expr)
	if err != nil {
		return nil, err
	}
	var out []selector
	var walkErr error
	parser.Inspect(e, func(node parser.Node, path []parser.Node) error {
		vs, ok := node.(*parser.VectorSelector)
		if !ok {
			return nil
		}
		s := selector{name: vs.Name, matchers: vs.LabelMatchers}
		if s.name == "" {
			for _, m := range vs.LabelMatchers {
				if m.Name == labels.MetricName && m.Type == labels.MatchEqual {
					s.name = m.Value
				}
			}
		}
		if s.name == "" {
			walkErr = fmt.Errorf("selector %s names no metric", vs)
		}
		// A range function sits two levels up: Call -> MatrixSelector -> here.
		if n := len(path); n >= 2 {
			if _, isMatrix := path[n-1].(*parser.MatrixSelector); isMatrix {
				if c, isCall := path[n-2].(*parser.Call); isCall {
					s.rate = c.Func.Name
				}
			}
		}
		out = append(out, s)
		return nil
	})
	return out, walkErr
}

// counterFunctions only make sense on counters (and histogram series,
// which are counters too).
var counterFunctions = map[string]bool{"rate": true, "irate": true, "increase": true}

// checkQueries parses every query and checks that its selectors name
// exported series (or recorded ones), with labels those series have, and
// that rate-like functions read counters.
func checkQueries(t errorfer, qs []query, idx map[string]series) {
	t.Helper()
	for _, q := range qs {
		sels, err := selectors(q.expr)
		if err != nil {
			t.Errorf("%s: %v\n\t%s", q.where, err, q.expr)
			continue
		}
		if len(sels) == 0 && !strings.Contains(q.expr, "vector(") {
			t.Errorf("%s: the expression reads no series: %s", q.where, q.expr)
		}
		for _, s := range sels {
			ser, ok := idx[s.name]
			if !ok {
				t.Errorf("%s: %s is neither exported by the stack nor recorded by a rule", q.where, s.name)
				continue
			}
			for _, m := range s.matchers {
				if m.Name != labels.MetricName && ser.labels != nil && !ser.labels[m.Name] {
					t.Errorf("%s: %s has no label %q", q.where, s.name, m.Name)
				}
			}
			if counterFunctions[s.rate] {
				switch ser.typ {
				case dto.MetricType_COUNTER, dto.MetricType_HISTOGRAM, dto.MetricType_SUMMARY:
				default:
					t.Errorf("%s: %s(%s): %s is a %s, not a counter", q.where, s.rate, s.name, s.name, ser.typ)
				}
			}
		}
	}
}

// Every expression of the recording and alerting rules parses with the
// Prometheus parser and reads only series the stack exports or the rules
// record.
func TestRuleExpressionsNameExportedSeries(t *testing.T) {
	qs, recorded := loadRules(t)
	if len(qs) == 0 {
		t.Fatal("no rules found")
	}
	checkQueries(t, qs, seriesIndex(exported(t), recorded))
}

// Every query of the Grafana dashboard parses and reads series the stack
// exports or the rules record, and the template variables' queries name
// existing series and labels.
func TestDashboardExpressionsNameExportedSeries(t *testing.T) {
	_, recorded := loadRules(t)
	idx := seriesIndex(exported(t), recorded)
	checkQueries(t, dashboardQueries(t), idx)
	labelValues := regexp.MustCompile(`^label_values\(\s*([a-zA-Z_:][a-zA-Z0-9_:]*)\s*,\s*([a-zA-Z_][a-zA-Z0-9_]*)\s*\)$`)
	for f, d := range dashboards(t) {
		for _, v := range d.Templating.List {
			if v.Type != "query" {
				continue
			}
			m := labelValues.FindStringSubmatch(v.Definition)
			if m == nil {
				t.Errorf("%s: variable %s: cannot read query %q", f, v.Name, v.Definition)
				continue
			}
			if s, ok := idx[m[1]]; !ok {
				t.Errorf("%s: variable %s reads %s, which is not exported", f, v.Name, m[1])
			} else if s.labels != nil && !s.labels[m[2]] {
				t.Errorf("%s: variable %s reads label %s, which %s does not have", f, v.Name, m[2], m[1])
			}
		}
	}
}

// The checker itself catches what it is there to catch.
func TestQueryCheckerFindsMistakes(t *testing.T) {
	idx := seriesIndex(map[string]family{
		"bunchsieve_x_total": {typ: dto.MetricType_COUNTER, labels: map[string]bool{"rule": true}},
		"bunchsieve_g":       {typ: dto.MetricType_GAUGE, labels: map[string]bool{}},
		"bunchsieve_h":       {typ: dto.MetricType_HISTOGRAM, labels: map[string]bool{}},
	}, []string{"bunchsieve:x:rate1m"})
	good := []string{
		`sum by (rule) (rate(bunchsieve_x_total{rule="a"}[1m]))`,
		`histogram_quantile(0.9, sum by (le) (rate(bunchsieve_h_bucket[5m])))`,
		`histogram_quantile(0.9, sum(rate(bunchsieve_h[5m])))`,
		`bunchsieve:x:rate1m > 2 and on () up == 1`,
	}
	bad := []string{
		`rate(bunchsieve_x_total[1m]`,                     // does not parse
		`rate(bunchsieve_missing_total[1m])`,              // not exported
		`rate(bunchsieve_x_total{rulle="a"}[1m])`,         // no such label
		`rate(bunchsieve_g[1m])`,                          // rate of a gauge
		`{rule="a"}`,                                      // names no metric
		`sum(bunchsieve_h_bucket{stage="x",quantile=""})`, // no such label
	}
	for _, e := range good {
		rec := &recorder{T: t}
		checkQueries(rec, []query{{"good", e}}, idx)
		if len(rec.errs) > 0 {
			t.Errorf("%s: %v", e, rec.errs)
		}
	}
	for _, e := range bad {
		rec := &recorder{T: t}
		checkQueries(rec, []query{{"bad", e}}, idx)
		if len(rec.errs) == 0 {
			t.Errorf("%s passed the checks", e)
		}
	}
	if got, unknown := expandGrafana(`rate(x{rule=~"$rule",s=~"${source:regex}"}[$__rate_interval]) $nope`, map[string]bool{"rule": true, "source": true}); got != `rate(x{rule=~".*",s=~".*"}[1m]) .*` || len(unknown) != 1 {
		t.Errorf("expandGrafana: %q, unknown %v", got, unknown)
	}
}

// recorder collects the errors checkQueriesInto reports.
type recorder struct {
	*testing.T
	errs []string
}

func (r *recorder) Errorf(format string, args ...any) {
	r.errs = append(r.errs, fmt.Sprintf(format, args...))
}

type errorfer interface {
	Helper()
	Errorf(format string, args ...any)
}

// Alerts carry a severity the routing can use and a summary; recording
// rule names follow level:metric:operation.
func TestRuleConventions(t *testing.T) {
	for _, f := range ruleFiles(t) {
		data, err := os.ReadFile(f)
		if err != nil {
			t.Fatal(err)
		}
		var rf ruleFile
		if err := yaml.Unmarshal(data, &rf); err != nil {
			t.Fatal(err)
		}
		for _, g := range rf.Groups {
			for _, r := range g.Rules {
				switch {
				case r.Alert != "":
					if s := r.Labels["severity"]; s != "critical" && s != "warning" {
						t.Errorf("%s: alert %s: severity %q, want critical or warning", f, r.Alert, s)
					}
					if r.Annotations["summary"] == "" || r.Annotations["description"] == "" {
						t.Errorf("%s: alert %s needs a summary and a description", f, r.Alert)
					}
					if !strings.HasPrefix(r.Alert, "Bunchsieve") {
						t.Errorf("%s: alert %s: names start with Bunchsieve", f, r.Alert)
					}
				case strings.Count(r.Record, ":") < 2 || !strings.HasPrefix(r.Record, "bunchsieve:"):
					t.Errorf("%s: recorded series %s: want bunchsieve:metric:operation", f, r.Record)
				}
			}
		}
	}
}

// docs/metrics.md lists exactly the recorded series of the rules.
func TestRecordedSeriesDocumented(t *testing.T) {
	_, recorded := loadRules(t)
	f, err := os.Open("../docs/metrics.md")
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	documented := map[string]bool{}
	name := regexp.MustCompile("`(bunchsieve:[a-z0-9_:]+)`")
	suffix := regexp.MustCompile("`(:[a-z0-9_]+)`")
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		line := sc.Text()
		if !strings.HasPrefix(line, "| `bunchsieve:") {
			continue
		}
		first := strings.Split(strings.Trim(line, "| "), "|")[0]
		// "`bunchsieve:a:p50_1m`, `:p90_1m`" lists p50_1m and p90_1m of a.
		var base string
		for _, m := range name.FindAllStringSubmatch(first, -1) {
			documented[m[1]] = true
			base = m[1][:strings.LastIndex(m[1], ":")]
		}
		for _, m := range suffix.FindAllStringSubmatch(first, -1) {
			documented[base+m[1]] = true
		}
	}
	rec := map[string]bool{}
	for _, r := range recorded {
		rec[r] = true
		if !documented[r] {
			t.Errorf("recorded series %s is not in docs/metrics.md", r)
		}
	}
	var extra []string
	for d := range documented {
		if !rec[d] {
			extra = append(extra, d)
		}
	}
	sort.Strings(extra)
	for _, d := range extra {
		t.Errorf("docs/metrics.md lists %s, which no rule records", d)
	}
}

// The dashboard's panels do not overlap and each has a title.
func TestDashboardLayout(t *testing.T) {
	for f, d := range dashboards(t) {
		if d.UID == "" || d.Title == "" {
			t.Errorf("%s: uid and title are required", f)
		}
		type cell struct{ x, y int }
		taken := map[cell]string{}
		ids := map[int]bool{}
		for _, p := range allPanels(d.Panels) {
			if p.Title == "" {
				t.Errorf("%s: panel %d has no title", f, p.ID)
			}
			if ids[p.ID] {
				t.Errorf("%s: panel id %d used twice", f, p.ID)
			}
			ids[p.ID] = true
			g := p.GridPos
			if g.W <= 0 || g.H <= 0 || g.X < 0 || g.X+g.W > 24 {
				t.Errorf("%s: panel %q: grid position %+v outside the 24-column grid", f, p.Title, g)
			}
			for x := g.X; x < g.X+g.W; x++ {
				for y := g.Y; y < g.Y+g.H; y++ {
					if other, ok := taken[cell{x, y}]; ok {
						t.Errorf("%s: panels %q and %q overlap at %d,%d", f, other, p.Title, x, y)
						goto next
					}
					taken[cell{x, y}] = p.Title
				}
			}
		next:
		}
	}
}
