package trigger

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"math"
	"regexp"
	"sort"
	"strconv"
	"strings"

	"go.yaml.in/yaml/v3"
)

// LanguageVersion is the version of the menu language this package reads.
const LanguageVersion = 1

// menuParser walks the YAML tree of one menu.
type menuParser struct {
	src  *source
	reg  *Registry
	sch  *schema // names the conditions may use, once features are parsed
	rule string  // the rule being parsed, for errors
}

// errAt builds the error for byte off of scalar n's value; off < 0 points
// at the node itself.
func (mp *menuParser) errAt(n *yaml.Node, off int, found, expected string) *MenuError {
	line, col := n.Line, n.Column
	if off >= 0 {
		line, col = mp.src.scalarPos(n, off)
	}
	if line < 1 {
		line, col = 1, 1
	}
	return &MenuError{File: mp.src.file, Line: line, Col: col, Found: found, Expected: expected, Rule: mp.rule}
}

// exprErr converts an error of the expression parser or checker inside
// scalar n into a MenuError at the offending token.
func (mp *menuParser) exprErr(n *yaml.Node, err error) *MenuError {
	var ee *exprError
	if errors.As(err, &ee) {
		return mp.errAt(n, ee.pos, ee.found, ee.expected)
	}
	return mp.errAt(n, 0, err.Error(), "a valid expression")
}

func resolveAlias(n *yaml.Node) *yaml.Node {
	for i := 0; n != nil && n.Kind == yaml.AliasNode && n.Alias != nil && i < 16; i++ {
		n = n.Alias
	}
	return n
}

func nodeKind(n *yaml.Node) string {
	switch n.Kind {
	case yaml.MappingNode:
		return "a mapping"
	case yaml.SequenceNode:
		return "a list"
	case yaml.ScalarNode:
		if n.Tag == "!!null" {
			return "an empty value"
		}
		return fmt.Sprintf("%q", n.Value)
	case yaml.AliasNode:
		return "an alias"
	}
	return "nothing"
}

// namePattern is what rule, set, stream and menu names look like.
var namePattern = regexp.MustCompile(`^[A-Za-z0-9][A-Za-z0-9_.-]*$`)

const nameExpected = "a name of letters, digits, '-', '_' and '.', starting with a letter or digit"

// ParseMenuWith is ParseMenu with the algorithms of reg.
func ParseMenuWith(file string, data []byte, reg *Registry) (*Menu, error) {
	mp := &menuParser{src: newSource(file, data), reg: reg}
	m, err := mp.parse()
	if err != nil {
		return nil, err
	}
	return m, nil
}

func (mp *menuParser) parse() (*Menu, error) {
	dec := yaml.NewDecoder(bytes.NewReader(mp.src.data))
	var doc yaml.Node
	if err := dec.Decode(&doc); err != nil {
		if err == io.EOF {
			return nil, &MenuError{File: mp.src.file, Line: 1, Col: 1, Found: "an empty file", Expected: "a menu with the keys menu, version and rules"}
		}
		return nil, mp.yamlError(err)
	}
	for {
		// Empty documents after the menu (a trailing "---") are harmless.
		var extra yaml.Node
		err := dec.Decode(&extra)
		if err == io.EOF {
			break
		}
		if err != nil {
			return nil, mp.yamlError(err)
		}
		if len(extra.Content) == 1 && isEmpty(extra.Content[0]) && extra.Content[0].Value == "" {
			continue
		}
		return nil, mp.errAt(&extra, -1, "a second YAML document", "one menu per file")
	}
	root := resolveAlias(&doc)
	if root.Kind == yaml.DocumentNode && len(root.Content) == 1 {
		root = resolveAlias(root.Content[0])
	}
	if root.Kind == yaml.ScalarNode && root.Tag == "!!null" {
		at := root
		if root.Value == "" {
			at = &doc // nothing written: point at the document, not past it
		}
		return nil, mp.errAt(at, -1, "an empty menu", "a menu with the keys menu, version and rules")
	}
	if root.Kind != yaml.MappingNode {
		return nil, mp.errAt(root, -1, nodeKind(root), "a mapping with the keys menu, version and rules")
	}
	top, err := mp.mapping(root, "the menu", []string{"menu", "version", "features", "rules", "prescale_sets", "active_set", "streams"})
	if err != nil {
		return nil, err
	}
	m := &Menu{File: mp.src.file}
	if err := mp.header(root, top, m); err != nil {
		return nil, err
	}
	if err := mp.features(top["features"], m); err != nil {
		return nil, err
	}
	if err := mp.rules(root, top["rules"], m); err != nil {
		return nil, err
	}
	if err := mp.prescaleSets(top["prescale_sets"], m); err != nil {
		return nil, err
	}
	if err := mp.activeSet(top["active_set"], m); err != nil {
		return nil, err
	}
	if err := mp.streams(top["streams"], m); err != nil {
		return nil, err
	}
	m.computeCanonical()
	return m, nil
}

// entry is one key of a mapping with its value.
type entry struct {
	key, val *yaml.Node
}

// mapping checks a mapping's keys against the allowed ones (nil: any
// key) and rejects duplicates and non-scalar keys. It returns the entries by
// key.
func (mp *menuParser) mapping(n *yaml.Node, what string, allowed []string) (map[string]entry, error) {
	out := map[string]entry{}
	for i := 0; i+1 < len(n.Content); i += 2 {
		k, v := resolveAlias(n.Content[i]), resolveAlias(n.Content[i+1])
		if k.Kind != yaml.ScalarNode || k.Tag == "!!null" {
			return nil, mp.errAt(k, -1, nodeKind(k)+" as a key", "a name as the key")
		}
		if allowed != nil && !contains(allowed, k.Value) {
			return nil, mp.errAt(k, -1, fmt.Sprintf("unknown key %q in %s", k.Value, what), "one of "+strings.Join(allowed, ", "))
		}
		if prev, dup := out[k.Value]; dup {
			return nil, mp.errAt(k, -1, fmt.Sprintf("key %q a second time in %s (first on line %d)", k.Value, what, prev.key.Line), "each key once")
		}
		out[k.Value] = entry{key: k, val: v}
	}
	return out, nil
}

// pairs returns the entries of a mapping in file order.
func pairs(n *yaml.Node) []entry {
	var out []entry
	for i := 0; i+1 < len(n.Content); i += 2 {
		out = append(out, entry{key: resolveAlias(n.Content[i]), val: resolveAlias(n.Content[i+1])})
	}
	return out
}

func contains(list []string, s string) bool {
	for _, x := range list {
		if x == s {
			return true
		}
	}
	return false
}

func sortedCopy(s []string) []string {
	out := append([]string(nil), s...)
	sort.Strings(out)
	return out
}

func (mp *menuParser) header(root *yaml.Node, top map[string]entry, m *Menu) error {
	name, ok := top["menu"]
	if !ok {
		return mp.errAt(root, -1, "no menu key", "menu: NAME, naming the menu")
	}
	if name.val.Kind != yaml.ScalarNode || !namePattern.MatchString(name.val.Value) {
		return mp.errAt(name.val, -1, "menu name "+nodeKind(name.val), nameExpected)
	}
	m.Name = name.val.Value
	ver, ok := top["version"]
	if !ok {
		return mp.errAt(root, -1, "no version key", fmt.Sprintf("version: %d", LanguageVersion))
	}
	if ver.val.Kind != yaml.ScalarNode || ver.val.Tag != "!!int" {
		return mp.errAt(ver.val, -1, "version "+nodeKind(ver.val), fmt.Sprintf("the integer %d", LanguageVersion))
	}
	v, err := strconv.Atoi(ver.val.Value)
	if err != nil || v != LanguageVersion {
		return mp.errAt(ver.val, -1, "version "+ver.val.Value, fmt.Sprintf("version %d, the only version this build reads", LanguageVersion))
	}
	m.Version = v
	return nil
}

// isEmpty reports a value written as nothing ("key:" or "key: ~").
func isEmpty(n *yaml.Node) bool { return n.Kind == yaml.ScalarNode && n.Tag == "!!null" }

func (mp *menuParser) features(e entry, m *Menu) error {
	cfg := &m.Features
	var blocks []entry
	if e.key != nil && !isEmpty(e.val) {
		if e.val.Kind != yaml.MappingNode {
			return mp.errAt(e.val, -1, "features as "+nodeKind(e.val), "a mapping of feature blocks such as towers: {...} and jets: {...}")
		}
		if _, err := mp.mapping(e.val, "features", nil); err != nil {
			return err
		}
		blocks = pairs(e.val)
	}
	var towers *entry
	for i := range blocks {
		if blocks[i].key.Value == "towers" {
			towers = &blocks[i]
		}
	}
	// The tower selection is parsed even when absent, so that its
	// defaults enter the canonical form.
	tp := &Params{mp: mp, name: "towers", values: map[string]*yaml.Node{}, read: map[string]bool{}, canon: map[string]string{}}
	if towers != nil {
		if !isEmpty(towers.val) && towers.val.Kind != yaml.MappingNode {
			return mp.errAt(towers.val, -1, "towers as "+nodeKind(towers.val), "a mapping such as {noise_cut: 0.5 GeV, eta_max: 4.0}")
		}
		tp = newParams(mp, "towers", towers.key, towers.val)
	} else {
		tp.block = e.key
		if tp.block == nil {
			tp.block = &yaml.Node{Line: 1, Column: 1}
		}
	}
	cfg.NoiseCut = tp.Energy("noise_cut", 0)
	cfg.EtaMin = tp.Number("eta_min", 0)
	cfg.EtaMax = tp.Number("eta_max", 0)
	if tp.err == nil {
		switch {
		case cfg.NoiseCut < 0:
			tp.Fail("noise_cut", "noise_cut "+formatEnergy(cfg.NoiseCut), "an energy >= 0 GeV")
		case cfg.EtaMin < 0:
			tp.Fail("eta_min", "eta_min "+formatNumber(cfg.EtaMin), "a value >= 0 (it bounds |eta|)")
		case tp.values["eta_max"] != nil && cfg.EtaMax <= 0:
			tp.Fail("eta_max", "eta_max "+formatNumber(cfg.EtaMax), "a value > 0 (leave eta_max out for no upper bound)")
		case cfg.EtaMax > 0 && cfg.EtaMin > cfg.EtaMax:
			tp.Fail("eta_min", fmt.Sprintf("eta_min %s above eta_max %s", formatNumber(cfg.EtaMin), formatNumber(cfg.EtaMax)), "eta_min <= eta_max")
		}
	}
	if tp.err != nil {
		return tp.err
	}
	if k := tp.unread(); k != nil {
		return mp.errAt(k, -1, fmt.Sprintf("unknown key %q in towers", k.Value), "one of "+tp.readKeys())
	}
	if tp.values["eta_max"] == nil {
		tp.canon["eta_max"] = "none"
	}
	m.features = append(m.features, "towers "+tp.canonical())

	for _, b := range blocks {
		if b.key.Value == "towers" {
			continue
		}
		if err := mp.collection(b, m); err != nil {
			return err
		}
	}
	sch, err := buildSchema(cfg)
	if err != nil {
		at := e.key
		if at == nil {
			at = &yaml.Node{Line: 1, Column: 1}
		}
		return mp.errAt(at, -1, err.Error(), "a valid feature configuration")
	}
	m.sch, mp.sch = sch, sch
	return nil
}

func (mp *menuParser) collection(b entry, m *Menu) error {
	name := b.key.Value
	if !validName(name) {
		return mp.errAt(b.key, -1, fmt.Sprintf("feature block %q", name), "towers, or a collection name of lower-case letters, digits and _ (such as jets)")
	}
	if why := reservedName(name); why != "" {
		return mp.errAt(b.key, -1, fmt.Sprintf("collection name %q, which is %s", name, why), "another name")
	}
	if b.val.Kind != yaml.MappingNode {
		return mp.errAt(b.val, -1, name+" as "+nodeKind(b.val), "a mapping such as {finder: window, ...}")
	}
	p := newParams(mp, name, b.key, b.val)
	fv, ok := p.values["finder"]
	p.read["finder"] = true
	names := mp.reg.Names()
	if !ok {
		return mp.errAt(b.key, -1, fmt.Sprintf("%s without a finder", name), "finder: one of "+quotedList(names))
	}
	if fv.Kind != yaml.ScalarNode {
		return mp.errAt(fv, -1, "finder "+nodeKind(fv), "one of "+quotedList(names))
	}
	factory, ok := mp.reg.Lookup(fv.Value)
	if !ok {
		return mp.errAt(fv, -1, fmt.Sprintf("unknown finder %q", fv.Value), "one of "+quotedList(names))
	}
	alg, err := factory(p)
	if p.err != nil {
		return p.err
	}
	if err != nil {
		var me *MenuError
		if errors.As(err, &me) {
			return me
		}
		return mp.errAt(b.key, -1, err.Error(), "valid parameters for finder "+fv.Value)
	}
	if alg == nil {
		return mp.errAt(fv, -1, fmt.Sprintf("finder %q that built nothing", fv.Value), "an algorithm")
	}
	if k := p.unread(); k != nil {
		return mp.errAt(k, -1, fmt.Sprintf("unknown key %q in %s (finder %s)", k.Value, name, fv.Value), "one of "+p.readKeys())
	}
	m.Features.Collections = append(m.Features.Collections, CollectionConfig{Name: name, Algorithm: alg})
	m.features = append(m.features, fmt.Sprintf("collection %s finder=%s %s", name, fv.Value, p.canonical()))
	return nil
}

func (mp *menuParser) rules(root *yaml.Node, e entry, m *Menu) error {
	if e.key == nil {
		return mp.errAt(root, -1, "no rules key", "rules: a mapping of rule names to rules")
	}
	if isEmpty(e.val) || (e.val.Kind == yaml.MappingNode && len(e.val.Content) == 0) {
		return mp.errAt(e.key, -1, "no rules", "at least one rule")
	}
	if e.val.Kind != yaml.MappingNode {
		return mp.errAt(e.val, -1, "rules as "+nodeKind(e.val), "a mapping of rule names to rules")
	}
	seen := map[string]*yaml.Node{}
	for _, r := range pairs(e.val) {
		mp.rule = ""
		k := r.key
		if k.Kind != yaml.ScalarNode || !namePattern.MatchString(k.Value) {
			return mp.errAt(k, -1, "rule name "+nodeKind(k), nameExpected)
		}
		if prev, dup := seen[k.Value]; dup {
			return mp.errAt(k, -1, fmt.Sprintf("duplicate rule name %q (first on line %d)", k.Value, prev.Line), "a name used by one rule only")
		}
		seen[k.Value] = k
		mp.rule = k.Value
		spec, err := mp.rule1(r)
		if err != nil {
			return err
		}
		m.Rules = append(m.Rules, spec)
	}
	mp.rule = ""
	return nil
}

var ruleKeys = []string{"when", "prescale", "keep_fraction", "disabled"}

func (mp *menuParser) rule1(r entry) (RuleSpec, error) {
	spec := RuleSpec{Name: r.key.Value, Line: r.key.Line, Col: r.key.Column, Prescale: 1}
	if r.val.Kind != yaml.MappingNode {
		return spec, mp.errAt(r.val, -1, "a rule written as "+nodeKind(r.val), "a mapping such as {when: \"met > 120 GeV\"}")
	}
	keys, err := mp.mapping(r.val, "a rule", ruleKeys)
	if err != nil {
		return spec, err
	}
	when, hasWhen := keys["when"]
	kf, hasKF := keys["keep_fraction"]
	ps, hasPS := keys["prescale"]
	switch {
	case hasWhen && hasKF:
		return spec, mp.errAt(kf.key, -1, "keep_fraction together with when", "one of them: keep_fraction makes every event pass")
	case hasPS && hasKF:
		return spec, mp.errAt(ps.key, -1, "prescale together with keep_fraction", "one of them: keep_fraction f is prescale round(1/f)")
	case !hasWhen && !hasKF:
		return spec, mp.errAt(r.key, -1, "a rule without when or keep_fraction", "when: CONDITION or keep_fraction: F")
	}
	if d, ok := keys["disabled"]; ok {
		if d.val.Kind != yaml.ScalarNode || d.val.Tag != "!!bool" {
			return spec, mp.errAt(d.val, -1, "disabled "+nodeKind(d.val), "true or false")
		}
		spec.Disabled = d.val.Value == "true"
	}
	if hasPS {
		p, err := mp.prescale(ps.val, false, "")
		if err != nil {
			return spec, err
		}
		spec.Prescale = p
	}
	if hasKF {
		v := kf.val
		f, err := strconv.ParseFloat(v.Value, 64)
		if v.Kind != yaml.ScalarNode || (v.Tag != "!!float" && v.Tag != "!!int") || err != nil || math.IsNaN(f) || !(f > 0 && f <= 1) {
			return spec, mp.errAt(v, -1, "keep_fraction "+nodeKind(v), "a number f with 0 < f <= 1")
		}
		p := math.Round(1 / f)
		if p > maxPrescale {
			return spec, mp.errAt(v, -1, "keep_fraction "+v.Value+", whose prescale round(1/f) is too large", fmt.Sprintf("f >= %g", 1/float64(maxPrescale)))
		}
		spec.KeepFraction, spec.Prescale = f, int(p)
		return spec, nil
	}
	w := when.val
	if w.Kind != yaml.ScalarNode || isEmpty(w) {
		return spec, mp.errAt(w, -1, "when "+nodeKind(w), "a condition in quotes, such as \"met > 120 GeV\"")
	}
	tree, err := parseExpr(w.Value)
	if err != nil {
		return spec, mp.exprErr(w, err)
	}
	cond, err := compileCondition(mp.sch, tree)
	if err != nil {
		return spec, mp.exprErr(w, err)
	}
	spec.When, spec.cond = printExpr(tree), cond
	return spec, nil
}

// maxPrescale keeps prescales exact as float64 and far from overflow.
const maxPrescale = 1 << 53

// prescale reads a prescale: an integer >= 1, or off where allowed. where,
// if not empty, follows the value in the error's found part, saying
// whose prescale it is.
func (mp *menuParser) prescale(v *yaml.Node, allowOff bool, where string) (int, error) {
	orOff := ""
	if allowOff {
		orOff = ", or off"
		if v.Kind == yaml.ScalarNode && v.Value == "off" {
			return 0, nil
		}
	} else if v.Kind == yaml.ScalarNode && v.Value == "off" {
		return 0, mp.errAt(v, -1, "prescale off in a rule", "an integer >= 1 (switch a rule off with disabled: true, or with off in a prescale set)")
	}
	if v.Kind != yaml.ScalarNode || v.Tag != "!!int" {
		return 0, mp.errAt(v, -1, "prescale "+nodeKind(v)+where, "an integer >= 1"+orOff)
	}
	p, err := strconv.ParseInt(v.Value, 10, 64)
	if err != nil || p < 1 || p > maxPrescale {
		// The bound belongs to the integer: "or off" comes after it.
		return 0, mp.errAt(v, -1, "prescale "+v.Value+where, fmt.Sprintf("an integer >= 1 and <= %d%s", int64(maxPrescale), orOff))
	}
	return int(p), nil
}

func (mp *menuParser) prescaleSets(e entry, m *Menu) error {
	if e.key == nil || isEmpty(e.val) {
		return nil
	}
	if e.val.Kind != yaml.MappingNode {
		return mp.errAt(e.val, -1, "prescale_sets as "+nodeKind(e.val), "a mapping of set names to {rule: prescale}")
	}
	seen := map[string]*yaml.Node{}
	for _, s := range pairs(e.val) {
		k := s.key
		if k.Kind != yaml.ScalarNode || !namePattern.MatchString(k.Value) {
			return mp.errAt(k, -1, "prescale set name "+nodeKind(k), nameExpected)
		}
		if k.Value == BaseSet {
			return mp.errAt(k, -1, fmt.Sprintf("a prescale set called %q", BaseSet), fmt.Sprintf("another name: %q is the rules' own prescales", BaseSet))
		}
		if prev, dup := seen[k.Value]; dup {
			return mp.errAt(k, -1, fmt.Sprintf("duplicate prescale set %q (first on line %d)", k.Value, prev.Line), "a name used by one set only")
		}
		seen[k.Value] = k
		set := PrescaleSet{Name: k.Value, Prescales: map[string]int{}}
		if !isEmpty(s.val) {
			if s.val.Kind != yaml.MappingNode {
				return mp.errAt(s.val, -1, "prescale set "+k.Value+" as "+nodeKind(s.val), "a mapping of rule names to prescales, such as {sumet-900: 10}")
			}
			if _, err := mp.mapping(s.val, "prescale set "+k.Value, nil); err != nil {
				return err
			}
			for _, r := range pairs(s.val) {
				if m.RuleIndex(r.key.Value) < 0 {
					return mp.errAt(r.key, -1, fmt.Sprintf("unknown rule %q in prescale set %q", r.key.Value, k.Value), "a rule defined under rules ("+ruleList(m)+")")
				}
				p, err := mp.prescale(r.val, true, fmt.Sprintf(" for rule %q in prescale set %q", r.key.Value, k.Value))
				if err != nil {
					return err
				}
				set.Prescales[r.key.Value] = p
			}
		}
		m.PrescaleSets = append(m.PrescaleSets, set)
	}
	return nil
}

func ruleList(m *Menu) string {
	names := make([]string, len(m.Rules))
	for i, r := range m.Rules {
		names[i] = r.Name
	}
	return strings.Join(names, ", ")
}

func (mp *menuParser) activeSet(e entry, m *Menu) error {
	if e.key == nil {
		m.ActiveSet = BaseSet
		if len(m.PrescaleSets) > 0 {
			m.ActiveSet = m.PrescaleSets[0].Name
		}
		return nil
	}
	v := e.val
	if v.Kind != yaml.ScalarNode || !contains(m.SetNames(), v.Value) {
		return mp.errAt(v, -1, "active_set "+nodeKind(v), "one of the prescale sets: "+strings.Join(m.SetNames(), ", "))
	}
	m.ActiveSet = v.Value
	return nil
}

func (mp *menuParser) streams(e entry, m *Menu) error {
	if e.key == nil || isEmpty(e.val) {
		return nil
	}
	if e.val.Kind != yaml.MappingNode {
		return mp.errAt(e.val, -1, "streams as "+nodeKind(e.val), "a mapping of stream names to lists of rules")
	}
	seen := map[string]*yaml.Node{}
	for _, s := range pairs(e.val) {
		k := s.key
		if k.Kind != yaml.ScalarNode || !namePattern.MatchString(k.Value) {
			return mp.errAt(k, -1, "stream name "+nodeKind(k), nameExpected)
		}
		if prev, dup := seen[k.Value]; dup {
			return mp.errAt(k, -1, fmt.Sprintf("duplicate stream %q (first on line %d)", k.Value, prev.Line), "a name used by one stream only")
		}
		seen[k.Value] = k
		if s.val.Kind != yaml.SequenceNode {
			return mp.errAt(s.val, -1, "stream "+k.Value+" as "+nodeKind(s.val), "a list of rule names such as [met-120, two-jets-80]")
		}
		if len(s.val.Content) == 0 {
			return mp.errAt(s.val, -1, "an empty stream "+k.Value, "at least one rule")
		}
		st := StreamSpec{Name: k.Value}
		for _, item := range s.val.Content {
			item = resolveAlias(item)
			if item.Kind != yaml.ScalarNode || m.RuleIndex(item.Value) < 0 {
				return mp.errAt(item, -1, fmt.Sprintf("unknown rule %s in stream %q", nodeKind(item), k.Value), "a rule defined under rules ("+ruleList(m)+")")
			}
			if contains(st.Rules, item.Value) {
				return mp.errAt(item, -1, fmt.Sprintf("rule %q twice in stream %q", item.Value, k.Value), "each rule once per stream")
			}
			st.Rules = append(st.Rules, item.Value)
		}
		m.Streams = append(m.Streams, st)
	}
	return nil
}

// yamlLine finds the line number in a YAML library error.
var yamlLine = regexp.MustCompile(`^yaml: line (\d+): (.*)$`)

// yamlError turns a YAML syntax error into a MenuError. The YAML library
// reports a line but no column, and for some errors the line is where the
// enclosing construct starts (an unclosed [ or {) rather than where the
// problem shows: the column is found on that line: the opening bracket of
// an unclosed flow collection, the ':' that is not allowed, the tab, or else
// the first non-blank character.
func (mp *menuParser) yamlError(err error) *MenuError {
	msg := err.Error()
	line, problem := 0, strings.TrimPrefix(msg, "yaml: ")
	if sm := yamlLine.FindStringSubmatch(msg); sm != nil {
		line, _ = strconv.Atoi(sm[1])
		problem = sm[2]
		if isParserProblem(problem) {
			// The parser reports a 0-based line; the scanner a 1-based one.
			line++
		}
	}
	if line < 1 {
		line = 1
	}
	if line > len(mp.src.lines) {
		line = len(mp.src.lines)
	}
	text := mp.lineText(line)
	col := -1
	switch {
	case strings.Contains(problem, "',' or ']'"):
		col = indexOutsideQuotes(text, '[', true)
	case strings.Contains(problem, "',' or '}'"):
		col = indexOutsideQuotes(text, '{', true)
	case strings.Contains(problem, "mapping values are not allowed"):
		col = lastMappingColon(text)
	case strings.Contains(problem, "tab"), strings.Contains(problem, "cannot start any token"):
		col = strings.IndexByte(text, '\t')
	}
	if strings.HasPrefix(problem, "unknown anchor") {
		if sm := regexp.MustCompile(`'(.*)'`).FindStringSubmatch(problem); sm != nil {
			if j := bytes.Index(mp.src.data, []byte("*"+sm[1])); j >= 0 {
				l, c := mp.src.position(j)
				return &MenuError{File: mp.src.file, Line: l, Col: c, Found: "YAML error: " + problem, Expected: "an alias to an anchor defined earlier"}
			}
		}
	}
	if problem == "did not find expected key" {
		// The library names the line where the mapping it was reading
		// began; what it met is usually a line further down indented to
		// no level of the mappings above it.
		if l := mp.misindented(line); l > 0 {
			// The line the library gives may be the offending one itself.
			text := mp.lineText(l)
			ind := len(text) - len(strings.TrimLeft(text, " "))
			return &MenuError{File: mp.src.file, Line: l, Col: ind + 1,
				Found:    fmt.Sprintf("YAML error: did not find expected key: this line's indentation, %s, matches no level of the mapping that begins on line %d", spaces(ind), line),
				Expected: "a key indented as the other keys of its mapping"}
		}
	}
	if col < 0 {
		col = len(text) - len(strings.TrimLeft(text, " \t"))
	}
	return &MenuError{File: mp.src.file, Line: line, Col: runeCol(text, col), Found: "YAML error: " + problem, Expected: "well-formed YAML"}
}

// misindented returns the first line, at or after line from, whose
// indentation fits no open block level above it: deeper than the line
// before though that line opens no block, or shallower than it but at no
// level still open. The levels are followed from the top of the file.
// Lines inside a flow collection or a quoted string that spans lines, and
// the lines of a block scalar, are passed over. It returns 0 when every
// line fits (the YAML error is then of another kind).
func (mp *menuParser) misindented(from int) int {
	var levels []int // indentations of the open block levels
	prev, opens := -1, false
	depth, quote := 0, byte(0) // open flow brackets and quote across lines
	scalar := -1               // indentation of a block scalar's key, while in it
	for l := 1; l <= len(mp.src.lines); l++ {
		text := mp.lineText(l)
		trimmed := strings.TrimLeft(text, " ")
		ind := len(text) - len(trimmed)
		if trimmed == "" || (depth == 0 && quote == 0 && trimmed[0] == '#') {
			continue
		}
		if scalar >= 0 {
			if ind > scalar {
				continue
			}
			scalar = -1
		}
		inside := depth > 0 || quote != 0
		var comment int
		depth, quote, comment = scanLine(trimmed, depth, quote)
		if inside {
			continue
		}
		switch {
		case prev < 0:
			levels = []int{ind}
		case ind > prev:
			if !opens && l >= from {
				return l
			}
			levels = append(levels, ind)
		case ind < prev:
			for len(levels) > 0 && levels[len(levels)-1] > ind {
				levels = levels[:len(levels)-1]
			}
			if len(levels) == 0 || levels[len(levels)-1] != ind {
				if l >= from {
					return l
				}
				levels = append(levels, ind)
			}
		}
		prev = ind
		body := strings.TrimRight(trimmed[:comment], " ")
		opens = strings.HasSuffix(body, ":") || strings.HasPrefix(trimmed, "- ") || trimmed == "-"
		if strings.HasSuffix(body, "|") || strings.HasSuffix(body, ">") || strings.HasSuffix(body, "|-") || strings.HasSuffix(body, ">-") {
			scalar = ind
		}
	}
	return 0
}

// spaces says n spaces in words.
func spaces(n int) string {
	if n == 1 {
		return "1 space"
	}
	return fmt.Sprintf("%d spaces", n)
}

// scanLine follows line from the flow-bracket depth and open quote (0
// for none) before it, and returns those after it and where a comment
// outside quotes starts (len(line) for none).
func scanLine(line string, depth int, quote byte) (int, byte, int) {
	for i := 0; i < len(line); i++ {
		c := line[i]
		switch {
		case quote == '"' && c == '\\':
			i++
		case quote != 0:
			if c == quote {
				quote = 0
			}
		case c == '"' || c == '\'':
			quote = c
		case c == '#' && (i == 0 || line[i-1] == ' '):
			return depth, quote, i
		case c == '{' || c == '[':
			depth++
		case (c == '}' || c == ']') && depth > 0:
			depth--
		}
	}
	return depth, quote, len(line)
}

// isParserProblem reports the YAML errors that come from the parser (whose
// line the library reports 0-based) rather than from the scanner.
func isParserProblem(p string) bool {
	for _, s := range []string{"did not find expected key", "did not find expected node content", "did not find expected '-' indicator",
		"did not find expected ',' or ']'", "did not find expected ',' or '}'", "did not find expected <document start>",
		"found duplicate %TAG directive", "found duplicate %YAML directive", "found incompatible YAML document", "found undefined tag handle"} {
		if p == s {
			return true
		}
	}
	return false
}

func (mp *menuParser) lineText(line int) string {
	start := mp.src.lines[line-1]
	end := len(mp.src.data)
	if line < len(mp.src.lines) {
		end = mp.src.lines[line] - 1
	}
	return strings.TrimRight(string(mp.src.data[start:end]), "\r")
}

// runeCol converts a byte index in text to a 1-based character column.
func runeCol(text string, i int) int {
	if i > len(text) {
		i = len(text)
	}
	return len([]rune(text[:i])) + 1
}

// indexOutsideQuotes returns the byte index of c in text outside quoted
// text, the last one if last (the innermost unclosed bracket), or -1.
func indexOutsideQuotes(text string, c byte, last bool) int {
	var quote byte
	found := -1
	for i := 0; i < len(text); i++ {
		switch ch := text[i]; {
		case quote != 0:
			if ch == quote {
				quote = 0
			}
		case ch == '"' || ch == '\'':
			quote = ch
		case ch == '#' && (i == 0 || text[i-1] == ' '):
			return found
		case ch == c:
			found = i
			if !last {
				return i
			}
		}
	}
	return found
}

// lastMappingColon returns the byte index of the last ':' followed by a
// blank or the end of the line, outside quotes: the mapping indicator that
// YAML refused.
func lastMappingColon(text string) int {
	var quote byte
	found := -1
	for i := 0; i < len(text); i++ {
		switch ch := text[i]; {
		case quote != 0:
			if ch == quote {
				quote = 0
			}
		case ch == '"' || ch == '\'':
			quote = ch
		case ch == '#' && (i == 0 || text[i-1] == ' '):
			return found
		case ch == ':' && (i+1 == len(text) || text[i+1] == ' ' || text[i+1] == '\t'):
			found = i
		}
	}
	return found
}
