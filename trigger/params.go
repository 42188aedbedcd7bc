package trigger

import (
	"fmt"
	"sort"
	"strconv"
	"strings"

	"go.yaml.in/yaml/v3"
)

// Params gives a Factory the parameters of one feature block of a menu,
// such as jets: {finder: window, seed: 5 GeV}. Every getter takes the
// default used when the key is absent; the first bad value is remembered
// (Err) and later getters return their defaults. Keys that no getter read
// are rejected by the menu parser after the Factory returns, so decoding is
// strict. A Params is used by one goroutine.
type Params struct {
	mp     *menuParser
	name   string
	block  *yaml.Node // the key node of the block, for errors about absent keys
	keys   []*yaml.Node
	values map[string]*yaml.Node
	read   map[string]bool
	canon  map[string]string
	err    *MenuError
}

func newParams(mp *menuParser, name string, key, mapping *yaml.Node) *Params {
	p := &Params{mp: mp, name: name, block: key, values: map[string]*yaml.Node{}, read: map[string]bool{}, canon: map[string]string{}}
	for i := 0; i+1 < len(mapping.Content); i += 2 {
		k := mapping.Content[i]
		p.keys = append(p.keys, k)
		p.values[k.Value] = resolveAlias(mapping.Content[i+1])
	}
	return p
}

// Name returns the name of the block, which is the collection's name.
func (p *Params) Name() string { return p.name }

// Err returns the first error recorded, as a *MenuError, or nil.
func (p *Params) Err() error {
	if p.err == nil {
		return nil
	}
	return p.err
}

// Fail records an error about the value of key (or about the block when
// the key is absent), unless an error is already recorded.
func (p *Params) Fail(key, found, expected string) {
	if p.err != nil {
		return
	}
	if v, ok := p.values[key]; ok {
		p.err = p.mp.errAt(v, 0, found, expected)
		return
	}
	p.err = p.mp.errAt(p.block, -1, found, expected)
}

func (p *Params) lookup(key string) (*yaml.Node, bool) {
	p.read[key] = true
	v, ok := p.values[key]
	if ok && p.err == nil && v.Kind != yaml.ScalarNode {
		p.err = p.mp.errAt(v, -1, fmt.Sprintf("%s for %s", nodeKind(v), key), "a single value")
		return nil, false
	}
	return v, ok && p.err == nil
}

// Energy returns the energy under key in GeV, written with its unit
// (5 GeV, 0.5 TeV, 500 MeV).
func (p *Params) Energy(key string, def float64) float64 {
	v, ok := p.lookup(key)
	if !ok {
		p.canon[key] = formatEnergy(def)
		return def
	}
	x, err := p.mp.quantity(v, key, true)
	if err != nil {
		p.err = err
		return def
	}
	p.canon[key] = formatEnergy(x)
	return x
}

// Number returns the dimensionless number under key.
func (p *Params) Number(key string, def float64) float64 {
	v, ok := p.lookup(key)
	if !ok {
		p.canon[key] = formatNumber(def)
		return def
	}
	x, err := p.mp.quantity(v, key, false)
	if err != nil {
		p.err = err
		return def
	}
	p.canon[key] = formatNumber(x)
	return x
}

// Int returns the integer under key.
func (p *Params) Int(key string, def int) int {
	v, ok := p.lookup(key)
	if !ok {
		p.canon[key] = strconv.Itoa(def)
		return def
	}
	n, err := strconv.Atoi(v.Value)
	if err != nil {
		p.err = p.mp.errAt(v, 0, fmt.Sprintf("%s %q", key, v.Value), "an integer")
		return def
	}
	p.canon[key] = strconv.Itoa(n)
	return n
}

// String returns the text under key.
func (p *Params) String(key, def string) string {
	v, ok := p.lookup(key)
	if !ok {
		p.canon[key] = strconv.Quote(def)
		return def
	}
	p.canon[key] = strconv.Quote(v.Value)
	return v.Value
}

// unread returns the first key, in file order, that no getter read.
func (p *Params) unread() *yaml.Node {
	for _, k := range p.keys {
		if !p.read[k.Value] {
			return k
		}
	}
	return nil
}

// readKeys lists the keys the factory knows, for "expected one of".
func (p *Params) readKeys() string {
	keys := make([]string, 0, len(p.read))
	for k := range p.read {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	return strings.Join(keys, ", ")
}

// canonical renders the parameters as sorted key=value pairs.
func (p *Params) canonical() string {
	keys := make([]string, 0, len(p.canon))
	for k := range p.canon {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	parts := make([]string, len(keys))
	for i, k := range keys {
		parts[i] = k + "=" + p.canon[k]
	}
	return strings.Join(parts, " ")
}

// quantity parses a number with an optional energy unit from a scalar: an
// energy (wantEnergy) must carry its unit, a dimensionless value must not.
func (mp *menuParser) quantity(v *yaml.Node, key string, wantEnergy bool) (float64, *MenuError) {
	text := v.Value
	example := "a plain number such as 2.5"
	if wantEnergy {
		example = "an energy with its unit, such as 5 GeV"
	}
	if isNonFiniteWord(strings.TrimSpace(text)) {
		return 0, mp.errAt(v, 0, fmt.Sprintf("%s %s", key, strings.TrimSpace(text)), "a finite number: "+example)
	}
	toks := lex(text)
	i := 0
	neg := false
	if toks[i].kind == tMinus {
		neg = true
		i++
	}
	t := toks[i]
	if t.kind == tIdent && isNonFiniteWord(t.text) {
		return 0, mp.errAt(v, t.pos, fmt.Sprintf("%s %s", key, t.text), "a finite number: "+example)
	}
	if t.kind != tNum {
		return 0, mp.errAt(v, t.pos, fmt.Sprintf("%s %q", key, text), example)
	}
	i++
	shift := 0
	u := toks[i]
	switch {
	case u.kind == tIdent:
		sh, known := energyUnits[u.text]
		if !known {
			return 0, mp.errAt(v, u.pos, fmt.Sprintf("unit %q", u.text), unitsExpected)
		}
		if !wantEnergy {
			return 0, mp.errAt(v, u.pos, fmt.Sprintf("unit %s on %s, which is dimensionless", u.text, key), "a plain number without a unit")
		}
		shift = sh
		i++
	case wantEnergy:
		return 0, mp.errAt(v, t.pos, fmt.Sprintf("%s %s without a unit", key, t.text), fmt.Sprintf("an energy with its unit, such as %s GeV", t.text))
	}
	if e := toks[i]; e.kind != tEOF {
		return 0, mp.errAt(v, e.pos, e.describe(), "nothing after "+strings.TrimSpace(text[:toks[i-1].end]))
	}
	x, ok := parseScaled(t.text, shift)
	if !ok {
		return 0, mp.errAt(v, t.pos, fmt.Sprintf("%s %s, which is out of range", key, t.text), "a finite number")
	}
	if neg {
		x = -x
	}
	return x, nil
}
