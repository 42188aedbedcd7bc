// Package deploy_test checks the deployment files in this directory: every
// PromQL expression parses and names series the stack really exports, the
// Prometheus files pass promtool, a real Prometheus scraping a real stack
// computes the same numbers, the NATS cluster configuration starts a
// cluster, and the container and Kubernetes files call the program with
// flags it has.
package deploy_test

import (
	"context"
	"errors"
	"io"
	"net/http"
	"os/exec"
	"sort"
	"sync"
	"testing"

	dto "github.com/prometheus/client_model/go"
	"github.com/prometheus/common/expfmt"

	"github.com/bunchsieve/bunchsieve/internal/toolcheck"
	"github.com/bunchsieve/bunchsieve/services/runconfig"
	"github.com/bunchsieve/bunchsieve/services/stack"
)

// tool returns the path of an external program, skipping t when it is not
// installed (failing it when BUNCHSIEVE_REQUIRE_TOOLS=1).
func tool(t *testing.T, name, pkg string) string {
	t.Helper()
	p, err := exec.LookPath(name)
	if err == nil {
		return p
	}
	toolcheck.Missing(t, name+" is not on PATH (Debian package "+pkg+"); skipping")
	return ""
}

// family is one metric family a running stack exports.
type family struct {
	typ    dto.MetricType
	labels map[string]bool
}

var (
	exportedOnce sync.Once
	exportedFams map[string]family
	exportedErr  error
)

// exported runs a short stack once per test binary and returns the metric
// families its /metrics serves, by name.
func exported(t *testing.T) map[string]family {
	t.Helper()
	exportedOnce.Do(func() { exportedFams, exportedErr = scrapeStack() })
	if exportedErr != nil {
		t.Fatal(exportedErr)
	}
	return exportedFams
}

func scrapeStack() (map[string]family, error) {
	st, err := stack.New(stack.Options{Run: runconfig.Default(), Crossings: 2000, MetricsAddr: "127.0.0.1:0"})
	if err != nil {
		return nil, err
	}
	defer st.Close()
	if _, err := st.Run(context.Background()); err != nil {
		return nil, err
	}
	mfs, err := scrapeFamilies(st.MetricsURL())
	if err != nil {
		return nil, err
	}
	out := map[string]family{}
	for _, mf := range mfs {
		f := family{typ: mf.GetType(), labels: map[string]bool{}}
		for _, m := range mf.GetMetric() {
			for _, lp := range m.GetLabel() {
				f.labels[lp.GetName()] = true
			}
		}
		out[mf.GetName()] = f
	}
	return out, nil
}

// scrapeFamilies reads url in the protobuf exposition format.
func scrapeFamilies(url string) ([]*dto.MetricFamily, error) {
	req, err := http.NewRequest(http.MethodGet, url, nil)
	if err != nil {
		return nil, err
	}
	req.Header.Set("Accept", string(expfmt.NewFormat(expfmt.TypeProtoDelim)))
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		return nil, err
	}
	defer resp.Body.Close()
	dec := expfmt.NewDecoder(resp.Body, expfmt.ResponseFormat(resp.Header))
	var out []*dto.MetricFamily
	for {
		mf := &dto.MetricFamily{}
		if err := dec.Decode(mf); errors.Is(err, io.EOF) {
			return out, nil
		} else if err != nil {
			return nil, err
		}
		out = append(out, mf)
	}
}

// targetLabels are attached by Prometheus (job, instance) or by the scrape
// configurations of this directory (stage, chain, pod).
var targetLabels = map[string]bool{"job": true, "instance": true, "stage": true, "chain": true, "pod": true}

// series is what a selector may name: a series of an exported family (a
// histogram exposes _bucket, _sum and _count and, natively, its own name),
// a series Prometheus makes itself, or a recording rule's output.
type series struct {
	family string
	typ    dto.MetricType
	labels map[string]bool // nil: unknown, not checked
}

func seriesIndex(fams map[string]family, recorded []string) map[string]series {
	idx := map[string]series{}
	withLabels := func(f family, extra ...string) map[string]bool {
		l := map[string]bool{}
		for k := range f.labels {
			l[k] = true
		}
		for k := range targetLabels {
			l[k] = true
		}
		for _, e := range extra {
			l[e] = true
		}
		return l
	}
	for name, f := range fams {
		switch f.typ {
		case dto.MetricType_HISTOGRAM, dto.MetricType_GAUGE_HISTOGRAM:
			idx[name] = series{name, f.typ, withLabels(f)} // native histogram
			idx[name+"_bucket"] = series{name, f.typ, withLabels(f, "le")}
			idx[name+"_sum"] = series{name, f.typ, withLabels(f)}
			idx[name+"_count"] = series{name, f.typ, withLabels(f)}
		case dto.MetricType_SUMMARY:
			idx[name] = series{name, f.typ, withLabels(f, "quantile")}
			idx[name+"_sum"] = series{name, f.typ, withLabels(f)}
			idx[name+"_count"] = series{name, f.typ, withLabels(f)}
		default:
			idx[name] = series{name, f.typ, withLabels(f)}
		}
	}
	// Made by Prometheus for every target.
	idx["up"] = series{"up", dto.MetricType_GAUGE, map[string]bool{"job": true, "instance": true, "stage": true, "chain": true, "pod": true}}
	for _, r := range recorded {
		idx[r] = series{family: r, typ: dto.MetricType_UNTYPED}
	}
	return idx
}

func sortedKeys[V any](m map[string]V) []string {
	out := make([]string, 0, len(m))
	for k := range m {
		out = append(out, k)
	}
	sort.Strings(out)
	return out
}
