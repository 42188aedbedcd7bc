package deploy_test

import (
	"context"
	"encoding/json"
	"fmt"
	"net"
	"net/http"
	"net/url"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/bunchsieve/bunchsieve/internal/syncbuf"
	"github.com/bunchsieve/bunchsieve/internal/toolcheck"
	"github.com/bunchsieve/bunchsieve/services/runconfig"
	"github.com/bunchsieve/bunchsieve/services/stack"
	"github.com/bunchsieve/bunchsieve/services/summary"
)

// A real Prometheus scraping a real stack every second, with the rules of
// this directory loaded, computes per-rule rates for every rule of the
// menu, evaluates every rule without error, fires no alert on a healthy
// run, and ends up with exactly the stack's own final counts. Skipped
// without the prometheus binary (Debian package prometheus) unless
// BUNCHSIEVE_REQUIRE_TOOLS=1.
func TestPrometheusScrapesStack(t *testing.T) {
	if testing.Short() {
		t.Skip("starts a Prometheus server; skipped with -short")
	}
	bin := tool(t, "prometheus", "prometheus")

	rc := runconfig.Default()
	rc.RateHz = 3000
	st, err := stack.New(stack.Options{Run: rc, MetricsAddr: "127.0.0.1:0"})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(st.Close)
	stop, cancel := context.WithCancel(context.Background())
	defer cancel()
	type result struct {
		sum *summary.Summary
		err error
	}
	done := make(chan result, 1)
	go func() {
		s, err := st.Run(stop)
		done <- result{s, err}
	}()

	prom := startPrometheus(t, bin, strings.TrimSuffix(strings.TrimPrefix(st.MetricsURL(), "http://"), "/metrics"))

	// Per-rule rates over a 5 s window: one series per rule of the menu.
	rules := menuRules(t, st)
	rates := prom.waitVector(t, `rate(bunchsieve_selection_rule_passed_total[5s])`, func(v []sample) bool {
		return len(v) == len(rules) && sumOf(v) > 0
	}, 30*time.Second)
	got := map[string]float64{}
	for _, s := range rates {
		got[s.Metric["rule"]] = s.Value
	}
	for _, r := range rules {
		if v, ok := got[r]; !ok || v < 0 {
			t.Errorf("rate of rule %s: %v (present %v)", r, v, ok)
		}
	}
	// Once a whole 5 s window lies inside the run, Prometheus' rates agree
	// with the chain's own flow: every built event is decided, and a rule
	// that passes every event passes at the decision rate.
	prom.waitVector(t, `min_over_time(bunchsieve_selection_decisions_total[6s]) > 0`, func(v []sample) bool { return len(v) == 1 }, 30*time.Second)
	flow, err := prom.query(`sum(rate(bunchsieve_selection_decisions_total[5s])) / sum(rate(bunchsieve_builder_events_built_total[5s]))`)
	if err != nil || len(flow) != 1 || flow[0].Value < 0.9 || flow[0].Value > 1.1 {
		t.Errorf("decided / built rate: %v %v, want about 1", flow, err)
	}
	share, err := prom.query(`sum by (rule) (rate(bunchsieve_selection_rule_passed_total[5s])) / on () group_left () sum(rate(bunchsieve_selection_decisions_total[5s]))`)
	if err != nil || len(share) != len(rules) {
		t.Fatalf("per-rule pass fraction: %v %v", share, err)
	}
	// The recording rules produce the per-rule accept rate too.
	prom.waitVector(t, `bunchsieve:selection_rule_accepted:rate1m`, func(v []sample) bool { return len(v) == len(rules) }, 20*time.Second)
	// Every rule has been evaluated, without error.
	prom.waitRulesHealthy(t, 20*time.Second)
	if firing := prom.firingAlerts(t); len(firing) > 0 {
		t.Errorf("alerts firing on a healthy run: %v", firing)
	}

	// Stop the run; /metrics keeps serving the final counts until Close,
	// and the next scrape must carry exactly those.
	cancel()
	res := <-done
	if res.err != nil {
		t.Fatal(res.err)
	}
	final := map[string]float64{}
	for _, r := range res.sum.Rules {
		final[r.Name] = float64(r.Accepted)
	}
	prom.waitVector(t, `bunchsieve_selection_rule_accepted_total`, func(v []sample) bool {
		if len(v) != len(final) {
			return false
		}
		for _, s := range v {
			if s.Value != final[s.Metric["rule"]] {
				return false
			}
		}
		return true
	}, 20*time.Second)
	for _, r := range res.sum.Rules {
		if r.Passed != res.sum.EventsDecided {
			continue
		}
		for _, s := range share {
			if s.Metric["rule"] == r.Name && (s.Value < 0.98 || s.Value > 1.02) {
				t.Errorf("rule %s passes every event, but Prometheus has it at %.3f of the decision rate", r.Name, s.Value)
			}
		}
	}
	total := prom.waitVector(t, `sum(bunchsieve_selection_events_accepted_total)`, func(v []sample) bool {
		return len(v) == 1 && v[0].Value == float64(res.sum.Accepted)
	}, 10*time.Second)
	t.Logf("run: %d crossings, %d accepted; Prometheus has %v accepted; first rule rates %v; pass fractions %v", res.sum.Crossings, res.sum.Accepted, total[0].Value, got, share)
}

// menuRules returns the rule names the stack's /metrics lists.
func menuRules(t *testing.T, st *stack.Stack) []string {
	t.Helper()
	mfs, err := scrapeFamilies(st.MetricsURL())
	if err != nil {
		t.Fatal(err)
	}
	for _, mf := range mfs {
		if mf.GetName() != "bunchsieve_selection_rule_passed_total" {
			continue
		}
		var out []string
		for _, m := range mf.GetMetric() {
			for _, lp := range m.GetLabel() {
				if lp.GetName() == "rule" {
					out = append(out, lp.GetValue())
				}
			}
		}
		return out
	}
	t.Fatal("the stack exports no bunchsieve_selection_rule_passed_total")
	return nil
}

type prometheus struct {
	base string
	log  *syncbuf.Buffer
}

type sample struct {
	Metric map[string]string
	Value  float64
}

func sumOf(v []sample) float64 {
	s := 0.0
	for _, x := range v {
		s += x.Value
	}
	return s
}

// startPrometheus runs a Prometheus scraping target every second with the
// rule files of this directory, storing into a temporary directory; it is
// killed when the test ends.
func startPrometheus(t *testing.T, bin, target string) *prometheus {
	t.Helper()
	dir := t.TempDir()
	var files []string
	for _, f := range ruleFiles(t) {
		abs, err := filepath.Abs(f)
		if err != nil {
			t.Fatal(err)
		}
		files = append(files, strconv.Quote(abs))
	}
	cfg := fmt.Sprintf(`global:
  scrape_interval: 1s
  evaluation_interval: 1s
rule_files: [%s]
scrape_configs:
  - job_name: bunchsieve-up
    static_configs:
      - targets: [%q]
        labels:
          stage: all
`, strings.Join(files, ", "), target)
	cfgPath := filepath.Join(dir, "prometheus.yml")
	if err := os.WriteFile(cfgPath, []byte(cfg), 0o644); err != nil {
		t.Fatal(err)
	}
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	addr := ln.Addr().String()
	ln.Close()
	p := &prometheus{base: "http://" + addr, log: &syncbuf.Buffer{Limit: 1 << 20}}
	cmd := exec.Command(bin, "--config.file="+cfgPath, "--storage.tsdb.path="+filepath.Join(dir, "data"),
		"--web.listen-address="+addr, "--log.level=warn")
	cmd.Stdout, cmd.Stderr = p.log, p.log
	toolcheck.DieWithParent(cmd)
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	exited := make(chan struct{})
	go func() {
		_ = cmd.Wait()
		close(exited)
	}()
	t.Cleanup(func() {
		_ = cmd.Process.Kill()
		<-exited
		if t.Failed() {
			t.Logf("prometheus log:\n%s", p.log.String())
		}
	})
	deadline := time.Now().Add(30 * time.Second)
	for {
		resp, err := http.Get(p.base + "/-/ready")
		if err == nil {
			resp.Body.Close()
			if resp.StatusCode == http.StatusOK {
				return p
			}
		}
		select {
		case <-exited:
			t.Fatalf("prometheus exited:\n%s", p.log.String())
		case <-time.After(100 * time.Millisecond):
		}
		if time.Now().After(deadline) {
			t.Fatalf("prometheus not ready within 30 s:\n%s", p.log.String())
		}
	}
}

func (p *prometheus) get(path string, params url.Values, out any) error {
	resp, err := http.Get(p.base + path + "?" + params.Encode())
	if err != nil {
		return err
	}
	defer resp.Body.Close()
	var env struct {
		Status string          `json:"status"`
		Error  string          `json:"error"`
		Data   json.RawMessage `json:"data"`
	}
	if err := json.NewDecoder(resp.Body).Decode(&env); err != nil {
		return err
	}
	if env.Status != "success" {
		return fmt.Errorf("%s: %s", path, env.Error)
	}
	return json.Unmarshal(env.Data, out)
}

func (p *prometheus) query(q string) ([]sample, error) {
	var data struct {
		ResultType string `json:"resultType"`
		Result     []struct {
			Metric map[string]string `json:"metric"`
			Value  [2]any            `json:"value"`
		} `json:"result"`
	}
	if err := p.get("/api/v1/query", url.Values{"query": {q}}, &data); err != nil {
		return nil, err
	}
	if data.ResultType != "vector" {
		return nil, fmt.Errorf("query %s: result type %s, want vector", q, data.ResultType)
	}
	var out []sample
	for _, r := range data.Result {
		s, _ := r.Value[1].(string)
		v, err := strconv.ParseFloat(s, 64)
		if err != nil {
			return nil, fmt.Errorf("query %s: value %v: %w", q, r.Value[1], err)
		}
		out = append(out, sample{Metric: r.Metric, Value: v})
	}
	return out, nil
}

// waitVector polls the instant query q until ok accepts its result.
func (p *prometheus) waitVector(t *testing.T, q string, ok func([]sample) bool, timeout time.Duration) []sample {
	t.Helper()
	deadline := time.Now().Add(timeout)
	var last []sample
	var lastErr error
	for time.Now().Before(deadline) {
		last, lastErr = p.query(q)
		if lastErr == nil && ok(last) {
			return last
		}
		time.Sleep(200 * time.Millisecond)
	}
	t.Fatalf("query %s: no acceptable answer within %v; last %v, error %v", q, timeout, last, lastErr)
	return nil
}

// waitRulesHealthy waits until every loaded rule has been evaluated and
// fails the test for any rule whose evaluation failed.
func (p *prometheus) waitRulesHealthy(t *testing.T, timeout time.Duration) {
	t.Helper()
	type rule struct {
		Name      string `json:"name"`
		Health    string `json:"health"`
		LastError string `json:"lastError"`
	}
	var data struct {
		Groups []struct {
			Name  string `json:"name"`
			Rules []rule `json:"rules"`
		} `json:"groups"`
	}
	deadline := time.Now().Add(timeout)
	for {
		if err := p.get("/api/v1/rules", nil, &data); err != nil {
			t.Fatal(err)
		}
		var unknown, bad []string
		n := 0
		for _, g := range data.Groups {
			for _, r := range g.Rules {
				n++
				switch r.Health {
				case "ok":
				case "unknown", "":
					unknown = append(unknown, r.Name)
				default:
					bad = append(bad, r.Name+": "+r.LastError)
				}
			}
		}
		if len(bad) > 0 {
			t.Fatalf("rules failing in Prometheus: %v", bad)
		}
		if n > 0 && len(unknown) == 0 {
			return
		}
		if time.Now().After(deadline) {
			t.Fatalf("%d rules loaded, not yet evaluated after %v: %v", n, timeout, unknown)
		}
		time.Sleep(200 * time.Millisecond)
	}
}

func (p *prometheus) firingAlerts(t *testing.T) []string {
	t.Helper()
	var data struct {
		Alerts []struct {
			Labels map[string]string `json:"labels"`
			State  string            `json:"state"`
		} `json:"alerts"`
	}
	if err := p.get("/api/v1/alerts", nil, &data); err != nil {
		t.Fatal(err)
	}
	var out []string
	for _, a := range data.Alerts {
		if a.State == "firing" {
			out = append(out, fmt.Sprint(a.Labels))
		}
	}
	return out
}
