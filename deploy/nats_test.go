package deploy_test

import (
	"context"
	"errors"
	"fmt"
	"io"
	"net"
	"net/url"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"
	promclient "github.com/prometheus/client_golang/prometheus"
	"go.yaml.in/yaml/v3"

	"github.com/bunchsieve/bunchsieve/detector"
	"github.com/bunchsieve/bunchsieve/services/capture"
	"github.com/bunchsieve/bunchsieve/services/emulator"
	"github.com/bunchsieve/bunchsieve/services/transport"
)

const (
	clusterName = "bunchsieve"
	storeDir    = "/data/jetstream"
)

func routeHosts(opts *server.Options) []string {
	var out []string
	for _, r := range opts.Routes {
		out = append(out, r.Host)
	}
	sort.Strings(out)
	return out
}

// checkNodeOptions checks what every member of the cluster needs: its own
// name, the shared cluster name, JetStream on a store directory, routes to
// every member, the client and cluster ports the other files use.
func checkNodeOptions(t *testing.T, where string, opts *server.Options, name string, routes []string) {
	t.Helper()
	if opts.ServerName != name {
		t.Errorf("%s: server_name %q, want %q", where, opts.ServerName, name)
	}
	if opts.Cluster.Name != clusterName {
		t.Errorf("%s: cluster name %q, want %q", where, opts.Cluster.Name, clusterName)
	}
	if !opts.JetStream || opts.StoreDir != storeDir {
		t.Errorf("%s: jetstream %v with store_dir %q, want enabled on %s", where, opts.JetStream, opts.StoreDir, storeDir)
	}
	if opts.Port != 4222 || opts.Cluster.Port != 6222 {
		t.Errorf("%s: client port %d, cluster port %d; the manifests use 4222 and 6222", where, opts.Port, opts.Cluster.Port)
	}
	if got := routeHosts(opts); !slices.Equal(got, routes) {
		t.Errorf("%s: routes %v, want %v", where, got, routes)
	}
	// Fragment batches are sized against the 1 MiB default.
	if opts.MaxPayload != 1<<20 {
		t.Errorf("%s: max_payload %d, want 1 MiB", where, opts.MaxPayload)
	}
}

// The three node files describe one cluster; the Kubernetes ConfigMap
// describes the same cluster with the StatefulSet's pod names.
func TestNATSClusterConfiguration(t *testing.T) {
	want := []string{"nats-1:6222", "nats-2:6222", "nats-3:6222"}
	for i := 1; i <= 3; i++ {
		path := filepath.Join("nats", fmt.Sprintf("nats-%d.conf", i))
		opts, err := server.ProcessConfigFile(path)
		if err != nil {
			t.Fatalf("%s: %v", path, err)
		}
		checkNodeOptions(t, path, opts, fmt.Sprintf("nats-%d", i), want)
	}

	conf, replicas, service, namespace := k8sNATS(t)
	path := filepath.Join(t.TempDir(), "nats.conf")
	if err := os.WriteFile(path, []byte(conf), 0o644); err != nil {
		t.Fatal(err)
	}
	var k8sRoutes []string
	for i := 0; i < replicas; i++ {
		k8sRoutes = append(k8sRoutes, fmt.Sprintf("nats-%d.%s.%s.svc:6222", i, service, namespace))
	}
	sort.Strings(k8sRoutes)
	for i := 0; i < replicas; i++ {
		pod := fmt.Sprintf("nats-%d", i)
		t.Setenv("POD_NAME", pod)
		opts, err := server.ProcessConfigFile(path)
		if err != nil {
			t.Fatalf("k8s/nats.yaml nats.conf: %v", err)
		}
		checkNodeOptions(t, "k8s/nats.yaml for pod "+pod, opts, pod, k8sRoutes)
	}
}

// k8sNATS returns the nats.conf of the ConfigMap and the StatefulSet's
// replicas, service name and namespace.
func k8sNATS(t *testing.T) (conf string, replicas int, service, namespace string) {
	t.Helper()
	for _, doc := range yamlDocs(t, filepath.Join("k8s", "nats.yaml")) {
		kind, _ := doc["kind"].(string)
		meta, _ := doc["metadata"].(map[string]any)
		switch kind {
		case "ConfigMap":
			data, _ := doc["data"].(map[string]any)
			conf, _ = data["nats.conf"].(string)
		case "StatefulSet":
			spec, _ := doc["spec"].(map[string]any)
			replicas, _ = spec["replicas"].(int)
			service, _ = spec["serviceName"].(string)
			namespace, _ = meta["namespace"].(string)
		}
	}
	if conf == "" || replicas != 3 || service == "" || namespace == "" {
		t.Fatalf("k8s/nats.yaml: want a ConfigMap with nats.conf and a StatefulSet of 3 replicas; got replicas %d, service %q, namespace %q", replicas, service, namespace)
	}
	return conf, replicas, service, namespace
}

// yamlDocs decodes every document of a multi-document YAML file.
func yamlDocs(t *testing.T, path string) []map[string]any {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	dec := yaml.NewDecoder(f)
	var out []map[string]any
	for {
		var doc map[string]any
		err := dec.Decode(&doc)
		if errors.Is(err, io.EOF) {
			return out
		}
		if err != nil {
			t.Fatalf("%s: %v", path, err)
		}
		if doc != nil {
			out = append(out, doc)
		}
	}
}

// The three node files start a real cluster: each server is started from
// its file with only the addresses moved to free loopback ports and the
// store to a temporary directory; the routes form, JetStream elects a
// meta leader, and a stream replicated on all three members takes writes.
func TestNATSClusterForms(t *testing.T) {
	if testing.Short() {
		t.Skip("starts a three-node JetStream cluster; skipped with -short")
	}
	// Clustered JetStream needs its routes configured from the start, so the
	// cluster ports are picked before the servers start.
	ports := freePorts(t, 3)
	var routes []*url.URL
	for _, p := range ports {
		routes = append(routes, &url.URL{Scheme: "nats-route", Host: fmt.Sprintf("127.0.0.1:%d", p)})
	}
	var servers []*server.Server
	for i := 1; i <= 3; i++ {
		opts, err := server.ProcessConfigFile(filepath.Join("nats", fmt.Sprintf("nats-%d.conf", i)))
		if err != nil {
			t.Fatal(err)
		}
		opts.Host, opts.Port = "127.0.0.1", -1
		opts.HTTPHost, opts.HTTPPort = "", 0
		opts.Cluster.Host, opts.Cluster.Port = "127.0.0.1", ports[i-1]
		opts.Routes = routes
		opts.StoreDir = t.TempDir()
		opts.JetStreamMaxMemory, opts.JetStreamMaxStore = 64<<20, 256<<20
		opts.NoLog, opts.NoSigs = !transport.LogServers(), true
		s, err := server.NewServer(opts)
		if err != nil {
			t.Fatalf("nats-%d: %v", i, err)
		}
		if !opts.NoLog {
			s.ConfigureLogger()
		}
		s.Start()
		t.Cleanup(func() {
			s.Shutdown()
			s.WaitForShutdown()
		})
		servers = append(servers, s)
	}
	for i, s := range servers {
		if !s.ReadyForConnections(10 * time.Second) {
			t.Fatalf("nats-%d not ready", i+1)
		}
	}
	waitFor(t, 20*time.Second, "every member routed to the two others", func() bool {
		for _, s := range servers {
			if s.NumRemotes() != 2 {
				return false
			}
		}
		return true
	})
	waitFor(t, 30*time.Second, "a JetStream meta leader", func() bool {
		for _, s := range servers {
			if s.JetStreamIsLeader() {
				return true
			}
		}
		return false
	})
	// The stream is the durable recording of the fragment batches
	// (services/capture), replicated on all three members: opened from
	// one server, filled by a readout publishing to another, saved
	// complete through the third.
	nc, err := nats.Connect(servers[2].ClientURL())
	if err != nil {
		t.Fatal(err)
	}
	defer nc.Close()
	js, err := jetstream.New(nc)
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	var st jetstream.Stream
	waitFor(t, 30*time.Second, "a stream replicated on 3 members", func() bool {
		st, _, err = capture.Open(ctx, js, capture.Options{MaxBytes: 64 << 20, Replicas: 3})
		return err == nil
	})
	ncR, err := nats.Connect(servers[0].ClientURL())
	if err != nil {
		t.Fatal(err)
	}
	defer ncR.Close()
	sources := publishRun(t, ncR, 300)
	var res capture.Result
	var batches int
	res, err = capture.Save(ctx, js, capture.SaveOptions{Sources: sources, Partitions: 1, Idle: 10 * time.Second,
		Create: func(uint32) (capture.Writer, error) { return countingWriter{&batches}, nil }})
	if err != nil || !res.Complete() || res.Crossings != 300 {
		t.Fatalf("save from the cluster: %v, complete %v (%v), %d crossings of 300", err, res.Complete(), res.Problems(), res.Crossings)
	}
	info, err := st.Info(ctx)
	if err != nil {
		t.Fatal(err)
	}
	// A second stream opened without a limit of its own fits itself to
	// what the members' 256 MiB stores have left beside the first's 64 MiB
	// (the cluster refuses larger ones as "no suitable peers for
	// placement", with insufficient storage).
	other, _, err := capture.Open(ctx, js, capture.Options{Subjects: transport.Subjects{Prefix: "second"}, Replicas: 3})
	if err != nil {
		t.Fatalf("open without a limit on the cluster: %v", err)
	}
	if got := other.CachedInfo().Config.MaxBytes; got < 64<<20 || got > 192<<20 {
		t.Errorf("the second stream's limit is %d MiB, want 64 to 192", got>>20)
	}
	if info.Cluster == nil || info.Cluster.Name != clusterName || len(info.Cluster.Replicas) != 2 || info.State.Msgs != uint64(batches) {
		t.Errorf("stream info: cluster %+v, %d messages; want cluster %s with a leader and 2 replicas, %d messages", info.Cluster, info.State.Msgs, clusterName, batches)
	}
	names := map[string]bool{}
	if info.Cluster != nil {
		names[info.Cluster.Leader] = true
		for _, r := range info.Cluster.Replicas {
			names[r.Name] = true
		}
	}
	for i := 1; i <= 3; i++ {
		if !names[fmt.Sprintf("nats-%d", i)] {
			t.Errorf("nats-%d holds no copy of the stream (members %v)", i, keys(names))
		}
	}
}

// freePorts returns n loopback ports that were free a moment ago.
func freePorts(t *testing.T, n int) []int {
	t.Helper()
	var out []int
	var lns []net.Listener
	for i := 0; i < n; i++ {
		ln, err := net.Listen("tcp", "127.0.0.1:0")
		if err != nil {
			t.Fatal(err)
		}
		lns = append(lns, ln)
		out = append(out, ln.Addr().(*net.TCPAddr).Port)
	}
	for _, ln := range lns {
		ln.Close()
	}
	return out
}

func keys(m map[string]bool) string { return strings.Join(sortedKeys(m), ",") }

// waitFor polls cond every 50 ms until it holds, failing after timeout.
func waitFor(t *testing.T, timeout time.Duration, what string, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(timeout)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("no %s within %v", what, timeout)
		}
		time.Sleep(50 * time.Millisecond)
	}
}

// publishRun publishes a short readout run of crossings crossings on nc,
// as `bunchsieve readout` does, and returns its sources.
func publishRun(t *testing.T, nc *nats.Conn, crossings uint64) []uint32 {
	t.Helper()
	d := detector.DefaultDescription()
	part, err := detector.NewPartition(d.Geometry, 4)
	if err != nil {
		t.Fatal(err)
	}
	gen, err := detector.NewSimpleGenerator(d, part, 1, detector.SimpleConfig{})
	if err != nil {
		t.Fatal(err)
	}
	emu, err := emulator.New(emulator.Config{Run: 2, Crossings: crossings}, gen, part.SourceIDs(), emulator.NewNATSSink(nc, transport.Subjects{}), promclient.NewRegistry())
	if err != nil {
		t.Fatal(err)
	}
	if err := emu.Run(context.Background()); err != nil {
		t.Fatal(err)
	}
	return part.SourceIDs()
}

// countingWriter counts the batches written.
type countingWriter struct{ n *int }

func (w countingWriter) WriteBatch(uint32, int, int64, []byte, int) error { *w.n++; return nil }
func (countingWriter) AddCrossings(uint64)                                {}
