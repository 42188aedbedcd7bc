package deploy_test

import (
	"bytes"
	"net"
	"net/url"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"

	"go.yaml.in/yaml/v3"

	"github.com/bunchsieve/bunchsieve/services/cli"
)

// Docker is not available where these files are written, so the container
// and Kubernetes files are checked by reading them: that every bunchsieve
// invocation uses flags the program has, that the NATS URLs point at the
// cluster members, that every metrics port is scraped, and that the
// image is built the way the README says.

// cliFlags returns the flags of `bunchsieve cmd` and whether each takes a
// value, read from the program's own --help.
func cliFlags(t *testing.T, cmd string) map[string]bool {
	t.Helper()
	var out bytes.Buffer
	if code := cli.Main([]string{cmd, "--help"}, &out, &out); code != 0 {
		t.Fatalf("bunchsieve %s --help: exit %d\n%s", cmd, code, out.String())
	}
	flags := map[string]bool{}
	for _, m := range regexp.MustCompile(`(?m)^  -([a-z0-9][a-z0-9-]*)( \S+)?$`).FindAllStringSubmatch(out.String(), -1) {
		flags[m[1]] = m[2] != ""
	}
	if len(flags) == 0 {
		t.Fatalf("bunchsieve %s --help lists no flags:\n%s", cmd, out.String())
	}
	return flags
}

// invocation is one call of the bunchsieve binary in a manifest.
type invocation struct {
	where   string
	command string
	values  map[string]string
}

// parseInvocation checks args against the program's flags and returns the
// flag values.
func parseInvocation(t *testing.T, where string, args []string) invocation {
	t.Helper()
	inv := invocation{where: where, values: map[string]string{}}
	if len(args) == 0 {
		t.Errorf("%s: no arguments", where)
		return inv
	}
	inv.command = args[0]
	switch inv.command {
	case "readout", "build", "select", "up":
	default:
		t.Errorf("%s: runs bunchsieve %q, want readout, build, select or up", where, inv.command)
		return inv
	}
	flags := cliFlags(t, inv.command)
	for i := 1; i < len(args); i++ {
		a := args[i]
		if !strings.HasPrefix(a, "-") {
			t.Errorf("%s: unexpected argument %q", where, a)
			continue
		}
		name, value, hasValue := strings.Cut(strings.TrimLeft(a, "-"), "=")
		takesValue, ok := flags[name]
		if !ok {
			t.Errorf("%s: bunchsieve %s has no flag --%s", where, inv.command, name)
			continue
		}
		if takesValue && !hasValue {
			if i+1 >= len(args) {
				t.Errorf("%s: --%s needs a value", where, name)
				continue
			}
			i++
			value = args[i]
		}
		inv.values[name] = value
	}
	return inv
}

// natsHosts returns host:port of every URL in a --nats value.
func natsHosts(t *testing.T, where, value string) []string {
	t.Helper()
	var out []string
	for _, u := range strings.Split(value, ",") {
		p, err := url.Parse(strings.TrimSpace(u))
		if err != nil || p.Scheme != "nats" || p.Port() == "" {
			t.Errorf("%s: --nats %q: want nats://host:port URLs", where, u)
			continue
		}
		out = append(out, p.Host)
	}
	return out
}

func metricsPort(t *testing.T, inv invocation) string {
	t.Helper()
	addr, ok := inv.values["metrics-addr"]
	if !ok {
		t.Errorf("%s: no --metrics-addr: the stage would not be scraped", inv.where)
		return ""
	}
	host, port, err := net.SplitHostPort(addr)
	if err != nil {
		t.Errorf("%s: --metrics-addr %q: %v", inv.where, addr, err)
		return ""
	}
	if host != "0.0.0.0" && host != "" {
		t.Errorf("%s: --metrics-addr %q: a container must listen on all interfaces to be scraped", inv.where, addr)
	}
	return port
}

func scrapeTargets(t *testing.T, path string) map[string]bool {
	t.Helper()
	var cfg struct {
		ScrapeConfigs []struct {
			StaticConfigs []struct {
				Targets []string `yaml:"targets"`
			} `yaml:"static_configs"`
			DNSSDConfigs []struct {
				Names []string `yaml:"names"`
			} `yaml:"dns_sd_configs"`
		} `yaml:"scrape_configs"`
	}
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if err := yaml.Unmarshal(data, &cfg); err != nil {
		t.Fatalf("%s: %v", path, err)
	}
	out := map[string]bool{}
	for _, sc := range cfg.ScrapeConfigs {
		for _, s := range sc.StaticConfigs {
			for _, tg := range s.Targets {
				out[tg] = true
			}
		}
		for _, d := range sc.DNSSDConfigs {
			for _, n := range d.Names {
				out[n] = true
			}
		}
	}
	return out
}

func strs(v any) []string {
	l, _ := v.([]any)
	var out []string
	for _, x := range l {
		out = append(out, strings.TrimSpace(toString(x)))
	}
	return out
}

func toString(v any) string {
	switch x := v.(type) {
	case string:
		return x
	case int:
		return strconv.Itoa(x)
	case nil:
		return ""
	}
	b, _ := yaml.Marshal(v)
	return strings.TrimSpace(string(b))
}

func dig(v any, path ...string) any {
	for _, p := range path {
		m, ok := v.(map[string]any)
		if !ok {
			return nil
		}
		v = m[p]
	}
	return v
}

// The compose file runs the three stages against the three NATS members,
// with flags the program has, each stage's metrics scraped by the compose
// Prometheus, and every mounted file present.
func TestComposeFile(t *testing.T) {
	docs := yamlDocs(t, "compose.yaml")
	if len(docs) != 1 {
		t.Fatalf("compose.yaml: %d documents", len(docs))
	}
	services, _ := docs[0]["services"].(map[string]any)
	targets := scrapeTargets(t, "prometheus-compose.yml")
	stages := map[string]bool{}
	for name, sv := range services {
		where := "compose.yaml: service " + name
		for _, vol := range strs(dig(sv, "volumes")) {
			src, _, _ := strings.Cut(vol, ":")
			if strings.HasPrefix(src, ".") {
				if _, err := os.Stat(src); err != nil {
					t.Errorf("%s mounts %s: %v", where, src, err)
				}
			}
		}
		if img := toString(dig(sv, "image")); img != "bunchsieve:dev" {
			continue
		}
		if df := toString(dig(sv, "build", "dockerfile")); df != "deploy/Dockerfile" || toString(dig(sv, "build", "context")) != ".." {
			t.Errorf("%s: build %v, want context .. and dockerfile deploy/Dockerfile", where, dig(sv, "build"))
		}
		inv := parseInvocation(t, where, strs(dig(sv, "command")))
		stages[inv.command] = true
		for _, h := range natsHosts(t, where, inv.values["nats"]) {
			host, port, _ := net.SplitHostPort(h)
			if _, ok := services[host]; !ok || port != "4222" {
				t.Errorf("%s: --nats names %s, not a NATS service of the file on 4222", where, h)
			}
		}
		if len(natsHosts(t, where, inv.values["nats"])) != 3 {
			t.Errorf("%s: --nats %q: list all three members so that the client can fail over", where, inv.values["nats"])
		}
		if p := metricsPort(t, inv); p != "" && !targets[name+":"+p] {
			t.Errorf("%s: metrics on port %s, but prometheus-compose.yml does not scrape %s:%s", where, p, name, p)
		}
	}
	for _, s := range []string{"readout", "build", "select"} {
		if !stages[s] {
			t.Errorf("compose.yaml runs no bunchsieve %s", s)
		}
	}
	for i := 1; i <= 3; i++ {
		n := "nats-" + strconv.Itoa(i)
		if _, ok := services[n]; !ok {
			t.Errorf("compose.yaml has no service %s", n)
			continue
		}
		found := false
		for _, vol := range strs(dig(services[n], "volumes")) {
			found = found || strings.HasPrefix(vol, "./nats/"+n+".conf:")
		}
		if !found {
			t.Errorf("compose.yaml: %s does not mount nats/%s.conf", n, n)
		}
	}
}

// The Kubernetes manifests are well-formed objects in one namespace; the
// bunchsieve containers use flags the program has, reach the StatefulSet's
// pods, run as non-root, and expose their metrics on a Service that the
// in-cluster Prometheus configuration finds.
func TestKubernetesManifests(t *testing.T) {
	files, err := filepath.Glob("k8s/*.yaml")
	if err != nil || len(files) == 0 {
		t.Fatalf("no k8s/*.yaml: %v", err)
	}
	_, replicas, natsService, namespace := k8sNATS(t)
	targets := scrapeTargets(t, "prometheus-k8s.yml")
	type workload struct {
		where  string
		labels map[string]string
		port   string
	}
	var workloads []workload
	type service struct {
		where, name string
		selector    map[string]string
		metrics     string
	}
	var services []service
	stages := map[string]bool{}
	for _, f := range files {
		for _, doc := range yamlDocs(t, f) {
			kind, name := toString(doc["kind"]), toString(dig(doc, "metadata", "name"))
			where := f + ": " + kind + " " + name
			if toString(doc["apiVersion"]) == "" || kind == "" || name == "" {
				t.Errorf("%s: apiVersion, kind and metadata.name are required", where)
			}
			if ns := toString(dig(doc, "metadata", "namespace")); kind != "Namespace" && ns != namespace {
				t.Errorf("%s: namespace %q, want %q", where, ns, namespace)
			}
			switch kind {
			case "Service":
				s := service{where: where, name: name, selector: stringMap(dig(doc, "spec", "selector"))}
				if len(s.selector) == 0 {
					t.Errorf("%s: no selector", where)
				}
				for _, p := range dig(doc, "spec", "ports").([]any) {
					if toString(dig(p, "name")) == "metrics" {
						s.metrics = toString(dig(p, "port"))
					}
				}
				services = append(services, s)
			case "Deployment", "StatefulSet", "Job":
				tmpl := dig(doc, "spec", "template")
				labels := stringMap(dig(tmpl, "metadata", "labels"))
				for k, v := range stringMap(dig(doc, "spec", "selector", "matchLabels")) {
					if labels[k] != v {
						t.Errorf("%s: selector %s=%s does not match the pod labels", where, k, v)
					}
				}
				if dig(tmpl, "spec", "securityContext", "runAsNonRoot") != true {
					t.Errorf("%s: pods must set securityContext.runAsNonRoot", where)
				}
				for _, c := range dig(tmpl, "spec", "containers").([]any) {
					cw := where + " container " + toString(dig(c, "name"))
					if dig(c, "securityContext", "allowPrivilegeEscalation") != false || dig(c, "securityContext", "readOnlyRootFilesystem") != true {
						t.Errorf("%s: want allowPrivilegeEscalation false and a read-only root filesystem", cw)
					}
					if toString(dig(c, "image")) != "bunchsieve:dev" {
						continue
					}
					inv := parseInvocation(t, cw, strs(dig(c, "args")))
					stages[inv.command] = true
					hosts := natsHosts(t, cw, inv.values["nats"])
					if len(hosts) != replicas {
						t.Errorf("%s: --nats lists %d members, the StatefulSet has %d", cw, len(hosts), replicas)
					}
					for _, h := range hosts {
						host, port, _ := net.SplitHostPort(h)
						pod, svc, _ := strings.Cut(host, ".")
						i, err := strconv.Atoi(strings.TrimPrefix(pod, "nats-"))
						if svc != natsService || err != nil || i < 0 || i >= replicas || port != "4222" {
							t.Errorf("%s: --nats names %s, not a pod nats-0..%d.%s on 4222", cw, h, replicas-1, natsService)
						}
					}
					port := metricsPort(t, inv)
					exposed := false
					for _, p := range dig(c, "ports").([]any) {
						exposed = exposed || (toString(dig(p, "name")) == "metrics" && toString(dig(p, "containerPort")) == port)
					}
					if !exposed {
						t.Errorf("%s: metrics port %s is not a containerPort named metrics", cw, port)
					}
					workloads = append(workloads, workload{where: cw, labels: labels, port: port})
				}
			}
		}
	}
	for _, s := range []string{"readout", "build", "select"} {
		if !stages[s] {
			t.Errorf("k8s/ runs no bunchsieve %s", s)
		}
	}
	for _, w := range workloads {
		var svc *service
		for i := range services {
			if subset(services[i].selector, w.labels) {
				svc = &services[i]
			}
		}
		switch {
		case svc == nil:
			t.Errorf("%s: no Service selects it", w.where)
		case svc.metrics != w.port:
			t.Errorf("%s: %s exposes metrics on %q, the container on %s", w.where, svc.where, svc.metrics, w.port)
		case !targets["_metrics._tcp."+svc.name+"."+namespace+".svc"]:
			t.Errorf("%s: prometheus-k8s.yml does not look up _metrics._tcp.%s.%s.svc", w.where, svc.name, namespace)
		}
	}
}

func stringMap(v any) map[string]string {
	m, _ := v.(map[string]any)
	out := map[string]string{}
	for k, x := range m {
		out[k] = toString(x)
	}
	return out
}

func subset(sel, labels map[string]string) bool {
	for k, v := range sel {
		if labels[k] != v {
			return false
		}
	}
	return len(sel) > 0
}

// The Dockerfile builds a static binary in one stage and runs it as a
// non-root user in a minimal one, from the package and version variable
// that exist.
func TestDockerfile(t *testing.T) {
	data, err := os.ReadFile("Dockerfile")
	if err != nil {
		t.Fatal(err)
	}
	text := string(data)
	stages := regexp.MustCompile(`(?m)^FROM\s+\S+(?:\s+AS\s+(\S+))?`).FindAllStringSubmatch(text, -1)
	if len(stages) < 2 || !strings.Contains(text, "COPY --from="+stages[0][1]) {
		t.Errorf("want a multi-stage build copying the binary out of the first stage; stages %v", stages)
	}
	for _, want := range []string{"CGO_ENABLED=0", "./services/bunchsieve", "-trimpath"} {
		if !strings.Contains(text, want) {
			t.Errorf("Dockerfile lacks %s", want)
		}
	}
	final := text[strings.LastIndex(text, "\nFROM "):]
	if !regexp.MustCompile(`(?m)^USER\s+(nonroot|65532)`).MatchString(final) {
		t.Error("the final stage must run as the nonroot user")
	}
	if _, err := os.Stat("../services/bunchsieve/main.go"); err != nil {
		t.Errorf("the Dockerfile builds ./services/bunchsieve: %v", err)
	}
	if m := regexp.MustCompile(`-X (\S+)\.Version=`).FindStringSubmatch(text); m == nil || m[1] != "github.com/bunchsieve/bunchsieve/services/cli" {
		t.Errorf("the version is stamped into %v, want github.com/bunchsieve/bunchsieve/services/cli.Version", m)
	}
	_ = cli.Version // the variable -X sets exists (compile-time check)
}
