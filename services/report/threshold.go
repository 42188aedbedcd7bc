package report

import (
	"bytes"
	"fmt"
	"regexp"
	"strconv"
	"strings"

	"go.yaml.in/yaml/v3"

	"github.com/bunchsieve/bunchsieve/trigger"
)

// threshold is one energy literal of a canonical condition.
type threshold struct {
	start, end int     // byte span of the number in the text
	gev        float64 // its value
	left       string  // the operand compared with it, or ""
	context    string  // the comparison, for messages
}

// energyLiteral matches a number with the GeV unit, as canonical
// conditions print energies (the shortest exact decimal, then " GeV").
var energyLiteral = regexp.MustCompile(`(^|[\s(,])([0-9]+(?:\.[0-9]+)?(?:e[+-]?[0-9]+)?) GeV\b`)

var comparisonOps = []string{" <= ", " >= ", " == ", " != ", " < ", " > "}

// thresholds lists the energy literals of a canonical condition in text
// order, with the operand each is compared with when the comparison reads
// "OPERAND OP NUMBER GeV" (OPERAND a single token).
func thresholds(cond string) []threshold {
	var out []threshold
	for _, m := range energyLiteral.FindAllStringSubmatchIndex(cond, -1) {
		start, end := m[4], m[5]
		v, err := strconv.ParseFloat(cond[start:end], 64)
		if err != nil {
			continue
		}
		th := threshold{start: start, end: end, gev: v, context: cond[start:end] + " GeV"}
		before := cond[:start]
		for _, op := range comparisonOps {
			if strings.HasSuffix(before, op) {
				lhs := operandBefore(before[:len(before)-len(op)])
				th.left = lhs
				th.context = lhs + op + th.context
				break
			}
		}
		out = append(out, th)
	}
	return out
}

// operandBefore returns the operand that ends s: a token such as met or
// jets[0].et, or a call such as mass(jets[0], jets[1]).
func operandBefore(s string) string {
	i := len(s)
	if strings.HasSuffix(s, ")") {
		depth := 0
		for i = len(s) - 1; i > 0; i-- {
			switch s[i] {
			case ')':
				depth++
			case '(':
				depth--
			}
			if depth == 0 {
				break
			}
		}
		for i > 0 && isWordByte(s[i-1]) {
			i--
		}
		return s[i:]
	}
	for i > 0 && !strings.ContainsRune(" (,", rune(s[i-1])) {
		i--
	}
	return s[i:]
}

func isWordByte(c byte) bool {
	return c == '_' || c >= 'a' && c <= 'z' || c >= 'A' && c <= 'Z' || c >= '0' && c <= '9'
}

// describeThresholds names the thresholds of a condition for messages.
func describeThresholds(ths []threshold) string {
	if len(ths) == 0 {
		return "none"
	}
	var parts []string
	for i, th := range ths {
		parts = append(parts, fmt.Sprintf("t%d (%s)", i+1, th.context))
	}
	return strings.Join(parts, ", ")
}

// findThreshold resolves a scan parameter: tN, or the operand of exactly
// one threshold.
func findThreshold(rule *trigger.RuleSpec, param string) (threshold, int, error) {
	if rule.PassThrough() {
		return threshold{}, 0, fmt.Errorf("%w: rule %s passes every event (keep_fraction): it has no threshold to scan", ErrBadSpec, rule.Name)
	}
	ths := thresholds(rule.When)
	if len(ths) == 0 {
		return threshold{}, 0, fmt.Errorf("%w: rule %s (%s) has no energy threshold to scan", ErrBadSpec, rule.Name, rule.When)
	}
	if len(param) > 1 && param[0] == 't' {
		if n, err := strconv.Atoi(param[1:]); err == nil {
			if n < 1 || n > len(ths) {
				return threshold{}, 0, fmt.Errorf("%w: rule %s has thresholds %s; there is no %s", ErrBadSpec, rule.Name, describeThresholds(ths), param)
			}
			return ths[n-1], n - 1, nil
		}
	}
	found := -1
	for i, th := range ths {
		if th.left == param {
			if found >= 0 {
				return threshold{}, 0, fmt.Errorf("%w: rule %s compares %s with more than one threshold (%s); name one as tN", ErrBadSpec, rule.Name, param, describeThresholds(ths))
			}
			found = i
		}
	}
	if found < 0 {
		return threshold{}, 0, fmt.Errorf("%w: rule %s has no threshold on %q; its thresholds are %s", ErrBadSpec, rule.Name, param, describeThresholds(ths))
	}
	return ths[found], found, nil
}

// substitute returns cond with threshold th set to v GeV.
func substitute(cond string, th threshold, v float64) string {
	return cond[:th.start] + strconv.FormatFloat(v, 'f', -1, 64) + cond[th.end:]
}

// extraRule is a rule added to a menu for a scan point.
type extraRule struct {
	name, when string
}

// augmentMenu re-parses the menu source with extra rules appended to its
// rules mapping. The conditions of the extra rules are compiled by the
// menu parser itself, with the same features, so their results can be
// read off the same decisions as the menu's own rules.
func augmentMenu(file string, source []byte, extra []extraRule) (*trigger.Menu, error) {
	var doc yaml.Node
	if err := yaml.Unmarshal(source, &doc); err != nil {
		return nil, fmt.Errorf("report: menu %s: %v", file, err)
	}
	if doc.Kind != yaml.DocumentNode || len(doc.Content) != 1 || doc.Content[0].Kind != yaml.MappingNode {
		return nil, fmt.Errorf("report: menu %s is not a mapping", file)
	}
	root := doc.Content[0]
	var rules *yaml.Node
	for i := 0; i+1 < len(root.Content); i += 2 {
		if root.Content[i].Value == "rules" {
			rules = root.Content[i+1]
			for rules.Kind == yaml.AliasNode {
				rules = rules.Alias
			}
		}
	}
	if rules == nil || rules.Kind != yaml.MappingNode {
		return nil, fmt.Errorf("report: menu %s has no rules mapping", file)
	}
	for _, r := range extra {
		rules.Content = append(rules.Content,
			&yaml.Node{Kind: yaml.ScalarNode, Value: r.name},
			&yaml.Node{Kind: yaml.MappingNode, Style: yaml.FlowStyle, Content: []*yaml.Node{
				{Kind: yaml.ScalarNode, Value: "when"},
				{Kind: yaml.ScalarNode, Value: r.when, Style: yaml.DoubleQuotedStyle},
			}})
	}
	var buf bytes.Buffer
	enc := yaml.NewEncoder(&buf)
	if err := enc.Encode(&doc); err != nil {
		return nil, fmt.Errorf("report: menu %s: %v", file, err)
	}
	if err := enc.Close(); err != nil {
		return nil, fmt.Errorf("report: menu %s: %v", file, err)
	}
	m, err := trigger.ParseMenu(file+" (with scan rules)", buf.Bytes())
	if err != nil {
		return nil, fmt.Errorf("report: scan rules: %w", err)
	}
	return m, nil
}
