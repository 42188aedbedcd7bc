package deploy_test

import (
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
)

// The Prometheus configurations, the rule files and the rules' unit tests
// pass Prometheus' own checker. Skipped without promtool (Debian package
// prometheus) unless BUNCHSIEVE_REQUIRE_TOOLS=1.
func TestPromtool(t *testing.T) {
	promtool := tool(t, "promtool", "prometheus")
	configs, err := filepath.Glob("prometheus*.yml")
	if err != nil || len(configs) == 0 {
		t.Fatalf("no prometheus*.yml in deploy/: %v", err)
	}
	runs := [][]string{append([]string{"check", "rules"}, ruleFiles(t)...), {"test", "rules", "alerts.test.yml"}}
	for _, c := range configs {
		runs = append(runs, []string{"check", "config", c})
	}
	for _, args := range runs {
		t.Run(strings.Join(args, " "), func(t *testing.T) {
			out, err := exec.Command(promtool, args...).CombinedOutput()
			if err != nil {
				t.Fatalf("promtool %s: %v\n%s", strings.Join(args, " "), err, out)
			}
			t.Logf("promtool %s:\n%s", strings.Join(args, " "), out)
		})
	}
}
