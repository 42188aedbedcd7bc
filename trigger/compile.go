package trigger

import (
	"fmt"
	"math"
	"sort"
	"strings"
)

// schema is the set of names an expression can use, fixed by the feature
// configuration: the scalar slots of Features and the collections with
// their fields.
type schema struct {
	scalars []Field
	colls   []collSchema
}

type collSchema struct {
	name         string
	fields       []Field
	pt, eta, phi int // field indices used by mass, dphi and dr; -1 if absent
}

// The built-in scalars, in slot order.
const (
	slotMET = iota
	slotMETPhi
	slotSumET
	builtinScalars
)

var builtinScalarFields = []Field{
	slotMET:    {Name: "met", Kind: Energy},
	slotMETPhi: {Name: "met_phi", Kind: Angle},
	slotSumET:  {Name: "sumet", Kind: Energy},
}

// functions are the names that call built-in functions; they cannot name
// features.
var functions = map[string]string{
	"abs":   "abs(x)",
	"count": "count(collection, condition)",
	"mass":  "mass(a, b)",
	"dphi":  "dphi(a, b)",
	"dr":    "dr(a, b)",
}

// reservedName reports why a name cannot be given to a feature, or "".
func reservedName(name string) string {
	switch {
	case keywords[name]:
		return "a keyword"
	case functions[name] != "":
		return "a function"
	case name == "pi":
		return "a constant"
	case isNonFiniteWord(name):
		return "a word for a non-finite number"
	}
	for _, f := range builtinScalarFields {
		if f.Name == name {
			return "a built-in feature"
		}
	}
	return ""
}

// validName reports whether name is a lower-case identifier.
func validName(name string) bool {
	if name == "" || !(name[0] >= 'a' && name[0] <= 'z') {
		return false
	}
	for i := 0; i < len(name); i++ {
		c := name[i]
		if !(c >= 'a' && c <= 'z' || c >= '0' && c <= '9' || c == '_') {
			return false
		}
	}
	return true
}

// buildSchema lays out the names of a feature configuration. The slot
// order here is the order ComputeFeatures fills.
func buildSchema(cfg *FeatureConfig) (*schema, error) {
	s := &schema{scalars: append([]Field(nil), builtinScalarFields...)}
	seen := map[string]string{}
	for _, f := range builtinScalarFields {
		seen[f.Name] = "a built-in feature"
	}
	for _, cc := range cfg.Collections {
		if !validName(cc.Name) {
			return nil, fmt.Errorf("trigger: collection name %q: want a lower-case letter followed by lower-case letters, digits or _", cc.Name)
		}
		if why := reservedName(cc.Name); why != "" {
			return nil, fmt.Errorf("trigger: collection name %q is %s", cc.Name, why)
		}
		if prev, dup := seen[cc.Name]; dup {
			return nil, fmt.Errorf("trigger: collection name %q is already %s", cc.Name, prev)
		}
		if cc.Algorithm == nil {
			return nil, fmt.Errorf("trigger: collection %q has no algorithm", cc.Name)
		}
		seen[cc.Name] = "a collection"
		sc := cc.Algorithm.Schema()
		cs := collSchema{name: cc.Name, fields: sc.Fields, pt: -1, eta: -1, phi: -1}
		fieldSeen := map[string]bool{}
		for i, f := range sc.Fields {
			if !validName(f.Name) || fieldSeen[f.Name] {
				return nil, fmt.Errorf("trigger: collection %q: field name %q is not a unique lower-case name", cc.Name, f.Name)
			}
			fieldSeen[f.Name] = true
			switch {
			case f.Name == "pt" && f.Kind == Energy:
				cs.pt = i
			case f.Name == "et" && f.Kind == Energy && cs.pt < 0:
				cs.pt = i
			case f.Name == "eta" && f.Kind == Number:
				cs.eta = i
			case f.Name == "phi" && f.Kind == Angle:
				cs.phi = i
			}
		}
		s.colls = append(s.colls, cs)
		for _, f := range sc.Scalars {
			if !validName(f.Name) {
				return nil, fmt.Errorf("trigger: collection %q: scalar name %q is not a lower-case name", cc.Name, f.Name)
			}
			if why := reservedName(f.Name); why != "" {
				return nil, fmt.Errorf("trigger: collection %q: scalar name %q is %s", cc.Name, f.Name, why)
			}
			if prev, dup := seen[f.Name]; dup {
				return nil, fmt.Errorf("trigger: collection %q: scalar name %q is already %s", cc.Name, f.Name, prev)
			}
			seen[f.Name] = "a scalar of collection " + cc.Name
			s.scalars = append(s.scalars, f)
		}
	}
	return s, nil
}

func (s *schema) scalar(name string) int {
	for i, f := range s.scalars {
		if f.Name == name {
			return i
		}
	}
	return -1
}

func (s *schema) coll(name string) int {
	for i, c := range s.colls {
		if c.name == name {
			return i
		}
	}
	return -1
}

func (c *collSchema) field(name string) int {
	for i, f := range c.fields {
		if f.Name == name {
			return i
		}
	}
	return -1
}

func (c *collSchema) fieldNames() string {
	names := make([]string, len(c.fields))
	for i, f := range c.fields {
		names[i] = f.Name
	}
	return strings.Join(names, ", ")
}

// evalCtx is the state of one evaluation: the features of the event and,
// for each collection, the object an enclosing count() is looking at.
type evalCtx struct {
	f   *Features
	cur []int
}

type (
	numFn  func(*evalCtx) float64
	boolFn func(*evalCtx) bool
)

type vtype uint8

const (
	vNum vtype = iota
	vBool
	vObj  // one object, coll[index]
	vColl // a whole collection
)

// value is a checked and compiled subexpression.
type value struct {
	t     vtype
	kind  Kind
	num   numFn
	cond  boolFn
	coll  int
	index int
	node  exprNode
	// isConst marks a number known at load time, in konst.
	isConst bool
	konst   float64
}

// compiler type-checks an expression against a schema and compiles it to
// closures. scope lists the collections of the enclosing count() calls,
// innermost last.
type compiler struct {
	sch   *schema
	scope []int
}

// compileCondition compiles the condition of a rule.
func compileCondition(sch *schema, n exprNode) (boolFn, error) {
	c := &compiler{sch: sch}
	v, err := c.condition(n, "the condition of a rule")
	if err != nil {
		return nil, err
	}
	return v.cond, nil
}

func (c *compiler) condition(n exprNode, where string) (value, error) {
	v, err := c.expr(n)
	if err != nil {
		return v, err
	}
	if v.t != vBool {
		return v, &exprError{pos: n.at(), found: describeValue(v), expected: "a condition such as met > 120 GeV for " + where}
	}
	return v, nil
}

func (c *compiler) number(n exprNode, where string) (value, error) {
	v, err := c.expr(n)
	if err != nil {
		return v, err
	}
	switch v.t {
	case vBool:
		return v, &exprError{pos: n.at(), found: describeValue(v), expected: "a number for " + where}
	case vObj:
		return v, &exprError{pos: n.at(), found: describeValue(v), expected: fmt.Sprintf("a number for %s; use a field such as %s.%s", where, printExpr(n), c.sch.colls[v.coll].fields[0].Name)}
	case vColl:
		return v, &exprError{pos: n.at(), found: describeValue(v), expected: fmt.Sprintf("a number for %s; use count(%s, ...) or %s[0].%s", where, printExpr(n), printExpr(n), c.sch.colls[v.coll].fields[0].Name)}
	}
	return v, nil
}

func describeValue(v value) string {
	text := printExpr(v.node)
	switch v.t {
	case vBool:
		return fmt.Sprintf("%q, a condition", text)
	case vObj:
		return fmt.Sprintf("%q, an object", text)
	case vColl:
		return fmt.Sprintf("%q, a collection", text)
	}
	return fmt.Sprintf("%q, %s", text, article(v.kind))
}

func article(k Kind) string {
	if k == Energy || k == Angle {
		return "an " + k.String()
	}
	return "a " + k.String()
}

func constant(n exprNode, k Kind, x float64) value {
	return value{t: vNum, kind: k, node: n, isConst: true, konst: x, num: func(*evalCtx) float64 { return x }}
}

func (c *compiler) expr(n exprNode) (value, error) {
	switch n := n.(type) {
	case *numLit:
		k := Number
		if n.unit != "" {
			k = Energy
		}
		return constant(n, k, n.val), nil
	case *nameRef:
		return c.name(n)
	case *indexRef:
		return c.index(n)
	case *callExpr:
		return c.call(n)
	case *unaryExpr:
		if n.op == "not" {
			x, err := c.condition(n.x, "not")
			if err != nil {
				return x, err
			}
			f := x.cond
			return value{t: vBool, node: n, cond: func(e *evalCtx) bool { return !f(e) }}, nil
		}
		x, err := c.number(n.x, "unary -")
		if err != nil {
			return x, err
		}
		if x.isConst {
			return constant(n, x.kind, -x.konst), nil
		}
		f := x.num
		return value{t: vNum, kind: x.kind, node: n, num: func(e *evalCtx) float64 { return -f(e) }}, nil
	case *binaryExpr:
		switch n.op {
		case "and", "or":
			return c.logical(n)
		case "+", "-", "*", "/":
			return c.arithmetic(n)
		}
		return c.comparison(n)
	case *inExpr:
		return c.window(n)
	}
	return value{}, &exprError{pos: n.at(), found: "an unknown construct", expected: "an expression"}
}

func (c *compiler) name(n *nameRef) (value, error) {
	// Fields of the objects of enclosing count() calls come first,
	// innermost first, then the constant pi, scalars and collections.
	for i := len(c.scope) - 1; i >= 0; i-- {
		ci := c.scope[i]
		cs := &c.sch.colls[ci]
		if fi := cs.field(n.name); fi >= 0 {
			stride := len(cs.fields)
			return value{t: vNum, kind: cs.fields[fi].Kind, node: n, num: func(e *evalCtx) float64 {
				return e.f.colls[ci].vals[e.cur[ci]*stride+fi]
			}}, nil
		}
	}
	if n.name == "pi" {
		return constant(n, Number, math.Pi), nil
	}
	if si := c.sch.scalar(n.name); si >= 0 {
		return value{t: vNum, kind: c.sch.scalars[si].Kind, node: n, num: func(e *evalCtx) float64 { return e.f.scalars[si] }}, nil
	}
	if ci := c.sch.coll(n.name); ci >= 0 {
		return value{t: vColl, coll: ci, node: n}, nil
	}
	if isNonFiniteWord(n.name) {
		return value{}, &exprError{pos: n.pos, found: fmt.Sprintf("%q", n.name), expected: "a finite number"}
	}
	if sig, ok := functions[n.name]; ok {
		return value{}, &exprError{pos: n.pos, found: fmt.Sprintf("function %q without arguments", n.name), expected: sig}
	}
	return value{}, &exprError{pos: n.pos, found: fmt.Sprintf("unknown name %q", n.name), expected: "one of " + c.knownNames()}
}

// knownNames lists the names usable at this point, for error messages.
func (c *compiler) knownNames() string {
	var names []string
	for i := len(c.scope) - 1; i >= 0; i-- {
		for _, f := range c.sch.colls[c.scope[i]].fields {
			names = append(names, f.Name)
		}
	}
	for _, f := range c.sch.scalars {
		names = append(names, f.Name)
	}
	for _, cs := range c.sch.colls {
		names = append(names, cs.name)
	}
	names = append(names, "pi")
	return strings.Join(names, ", ")
}

func (c *compiler) collections() string {
	names := make([]string, len(c.sch.colls))
	for i, cs := range c.sch.colls {
		names[i] = cs.name
	}
	if len(names) == 0 {
		return "none is configured under features"
	}
	return strings.Join(names, ", ")
}

func (c *compiler) index(n *indexRef) (value, error) {
	ci := c.sch.coll(n.coll)
	if ci < 0 {
		return value{}, &exprError{pos: n.pos, found: fmt.Sprintf("unknown collection %q", n.coll), expected: "a collection (" + c.collections() + ")"}
	}
	cs := &c.sch.colls[ci]
	if n.field == "" {
		return value{t: vObj, coll: ci, index: n.index, node: n}, nil
	}
	fi := cs.field(n.field)
	if fi < 0 {
		return value{}, &exprError{pos: n.fieldAt, found: fmt.Sprintf("unknown field %q of %s", n.field, n.coll), expected: "one of " + cs.fieldNames()}
	}
	k := n.index*len(cs.fields) + fi
	return value{t: vNum, kind: cs.fields[fi].Kind, node: n, num: func(e *evalCtx) float64 {
		vals := e.f.colls[ci].vals
		if k >= len(vals) {
			return math.NaN() // no such object: every comparison with it is false
		}
		return vals[k]
	}}, nil
}

func (c *compiler) logical(n *binaryExpr) (value, error) {
	x, err := c.condition(n.x, n.op)
	if err != nil {
		return x, err
	}
	y, err := c.condition(n.y, n.op)
	if err != nil {
		return y, err
	}
	fx, fy := x.cond, y.cond
	if n.op == "and" {
		return value{t: vBool, node: n, cond: func(e *evalCtx) bool { return fx(e) && fy(e) }}, nil
	}
	return value{t: vBool, node: n, cond: func(e *evalCtx) bool { return fx(e) || fy(e) }}, nil
}

// literalOf returns the number literal a value was written as, looking
// through a unary minus, or nil.
func literalOf(v value) *numLit {
	n := v.node
	for {
		switch m := n.(type) {
		case *numLit:
			return m
		case *unaryExpr:
			if m.op != "-" {
				return nil
			}
			n = m.x
		default:
			return nil
		}
	}
}

// compatible reports whether two kinds may be compared or added: the same
// kind, or plain numbers with angles (angles are in radians).
func compatible(a, b Kind) bool {
	return a == b || (a != Energy && b != Energy)
}

// mismatch explains why x and y cannot meet at operator op. A number
// literal on either side is the likely culprit, a threshold written
// without its unit or with a unit it should not have, so it is blamed first.
func mismatch(op string, opPos int, x, y value) error {
	for _, pair := range [][2]value{{y, x}, {x, y}} {
		v, other := pair[0], pair[1]
		lit := literalOf(v)
		if lit == nil || other.isConst {
			continue
		}
		if lit.unit == "" && other.kind == Energy {
			return &exprError{pos: lit.pos,
				found:    fmt.Sprintf("number %s without a unit next to %s, an energy", lit.text, printExpr(other.node)),
				expected: fmt.Sprintf("an energy with its unit, such as %s GeV", lit.text)}
		}
		if lit.unit != "" && other.kind != Energy {
			return &exprError{pos: lit.unitAt,
				found:    fmt.Sprintf("unit %s next to %s, %s", lit.unit, printExpr(other.node), article(other.kind)),
				expected: "a plain number without a unit"}
		}
	}
	return &exprError{pos: opPos,
		found:    fmt.Sprintf("%s %s %s", article(x.kind), op, article(y.kind)),
		expected: "quantities of the same kind on both sides (energies in GeV, or plain numbers)"}
}

func (c *compiler) arithmetic(n *binaryExpr) (value, error) {
	x, err := c.number(n.x, n.op)
	if err != nil {
		return x, err
	}
	y, err := c.number(n.y, n.op)
	if err != nil {
		return y, err
	}
	var k Kind
	switch n.op {
	case "+", "-":
		if !compatible(x.kind, y.kind) {
			return value{}, mismatch(n.op, n.pos, x, y)
		}
		k = joinKind(x.kind, y.kind)
	case "*":
		if x.kind == Energy && y.kind == Energy {
			for _, v := range []value{y, x} {
				if lit := literalOf(v); lit != nil && lit.unit != "" {
					return value{}, &exprError{pos: lit.unitAt, found: fmt.Sprintf("unit %s on a factor of an energy", lit.unit), expected: "a plain number (energy times energy is not a quantity of this language)"}
				}
			}
			return value{}, &exprError{pos: n.pos, found: "an energy * an energy", expected: "at most one energy in a product"}
		}
		k = joinKind(x.kind, y.kind)
	case "/":
		switch {
		case x.kind == Energy && y.kind == Energy:
			k = Number
		case y.kind == Energy:
			if lit := literalOf(y); lit != nil && lit.unit != "" {
				return value{}, &exprError{pos: lit.unitAt, found: fmt.Sprintf("unit %s on the divisor of %s", lit.unit, article(x.kind)), expected: "a plain number"}
			}
			return value{}, &exprError{pos: n.pos, found: fmt.Sprintf("%s / an energy", article(x.kind)), expected: "an energy divided by an energy or by a plain number"}
		default:
			k = joinKind(x.kind, y.kind)
		}
	}
	fx, fy := x.num, y.num
	if x.isConst && y.isConst {
		return constant(n, k, arith(n.op, x.konst, y.konst)), nil
	}
	var f numFn
	switch n.op {
	case "+":
		f = func(e *evalCtx) float64 { return fx(e) + fy(e) }
	case "-":
		f = func(e *evalCtx) float64 { return fx(e) - fy(e) }
	case "*":
		f = func(e *evalCtx) float64 { return fx(e) * fy(e) }
	default:
		f = func(e *evalCtx) float64 { return fx(e) / fy(e) }
	}
	return value{t: vNum, kind: k, node: n, num: f}, nil
}

func arith(op string, a, b float64) float64 {
	switch op {
	case "+":
		return a + b
	case "-":
		return a - b
	case "*":
		return a * b
	}
	return a / b
}

func joinKind(a, b Kind) Kind {
	switch {
	case a == Energy || b == Energy:
		return Energy
	case a == Angle || b == Angle:
		return Angle
	}
	return Number
}

func (c *compiler) comparison(n *binaryExpr) (value, error) {
	x, err := c.number(n.x, n.op)
	if err != nil {
		return x, err
	}
	y, err := c.number(n.y, n.op)
	if err != nil {
		return y, err
	}
	if !compatible(x.kind, y.kind) {
		return value{}, mismatch(n.op, n.pos, x, y)
	}
	return value{t: vBool, node: n, cond: compare(n.op, x, y)}, nil
}

// compare builds a comparison. With IEEE arithmetic every ordered
// comparison with NaN (a missing object) is false already; != is made
// false too, so that a missing object never satisfies a comparison.
func compare(op string, x, y value) boolFn {
	fx, fy := x.num, y.num
	if y.isConst {
		k := y.konst
		switch op {
		case "<":
			return func(e *evalCtx) bool { return fx(e) < k }
		case "<=":
			return func(e *evalCtx) bool { return fx(e) <= k }
		case ">":
			return func(e *evalCtx) bool { return fx(e) > k }
		case ">=":
			return func(e *evalCtx) bool { return fx(e) >= k }
		case "==":
			return func(e *evalCtx) bool { return fx(e) == k }
		default:
			return func(e *evalCtx) bool { a := fx(e); return a != k && a == a && k == k }
		}
	}
	switch op {
	case "<":
		return func(e *evalCtx) bool { return fx(e) < fy(e) }
	case "<=":
		return func(e *evalCtx) bool { return fx(e) <= fy(e) }
	case ">":
		return func(e *evalCtx) bool { return fx(e) > fy(e) }
	case ">=":
		return func(e *evalCtx) bool { return fx(e) >= fy(e) }
	case "==":
		return func(e *evalCtx) bool { return fx(e) == fy(e) }
	default:
		return func(e *evalCtx) bool { a, b := fx(e), fy(e); return a != b && a == a && b == b }
	}
}

func (c *compiler) window(n *inExpr) (value, error) {
	x, err := c.number(n.x, "in")
	if err != nil {
		return x, err
	}
	lo, err := c.number(n.lo, "the lower end of a window")
	if err != nil {
		return lo, err
	}
	hi, err := c.number(n.hi, "the upper end of a window")
	if err != nil {
		return hi, err
	}
	for _, end := range []value{lo, hi} {
		if !compatible(x.kind, end.kind) {
			return value{}, mismatch("in", n.pos, x, end)
		}
	}
	fx, flo, fhi := x.num, lo.num, hi.num
	if lo.isConst && hi.isConst {
		a, b := lo.konst, hi.konst
		return value{t: vBool, node: n, cond: func(e *evalCtx) bool { v := fx(e); return v >= a && v <= b }}, nil
	}
	return value{t: vBool, node: n, cond: func(e *evalCtx) bool { v := fx(e); return v >= flo(e) && v <= fhi(e) }}, nil
}

func (c *compiler) call(n *callExpr) (value, error) {
	sig, ok := functions[n.fn]
	if !ok {
		known := make([]string, 0, len(functions))
		for _, s := range functions {
			known = append(known, s)
		}
		sort.Strings(known)
		return value{}, &exprError{pos: n.pos, found: fmt.Sprintf("unknown function %q", n.fn), expected: "one of " + strings.Join(known, ", ")}
	}
	argc := map[string][2]int{"abs": {1, 1}, "count": {1, 2}, "mass": {2, 2}, "dphi": {2, 2}, "dr": {2, 2}}[n.fn]
	if len(n.args) < argc[0] || len(n.args) > argc[1] {
		return value{}, &exprError{pos: n.pos, found: fmt.Sprintf("%s with %d arguments", n.fn, len(n.args)), expected: sig}
	}
	switch n.fn {
	case "abs":
		x, err := c.number(n.args[0], "abs")
		if err != nil {
			return x, err
		}
		if x.isConst {
			return constant(n, x.kind, math.Abs(x.konst)), nil
		}
		f := x.num
		return value{t: vNum, kind: x.kind, node: n, num: func(e *evalCtx) float64 { return math.Abs(f(e)) }}, nil
	case "count":
		return c.count(n)
	case "mass", "dr":
		a, err := c.object(n.args[0], n.fn, true)
		if err != nil {
			return a, err
		}
		b, err := c.object(n.args[1], n.fn, true)
		if err != nil {
			return b, err
		}
		ka, kb := c.kinematics(a), c.kinematics(b)
		if n.fn == "mass" {
			return value{t: vNum, kind: Energy, node: n, num: func(e *evalCtx) float64 {
				pt1, eta1, phi1, ok1 := ka.read(e)
				pt2, eta2, phi2, ok2 := kb.read(e)
				if !ok1 || !ok2 {
					return math.NaN()
				}
				return InvariantMass(pt1, eta1, phi1, pt2, eta2, phi2)
			}}, nil
		}
		return value{t: vNum, kind: Number, node: n, num: func(e *evalCtx) float64 {
			_, eta1, phi1, ok1 := ka.read(e)
			_, eta2, phi2, ok2 := kb.read(e)
			if !ok1 || !ok2 {
				return math.NaN()
			}
			return DeltaR(eta1, phi1, eta2, phi2)
		}}, nil
	default: // dphi
		var fs [2]numFn
		for i, a := range n.args {
			v, err := c.object(a, "dphi", false)
			if err != nil {
				return v, err
			}
			if v.t == vObj {
				k := c.kinematics(v)
				fs[i] = func(e *evalCtx) float64 {
					_, _, phi, ok := k.read(e)
					if !ok {
						return math.NaN()
					}
					return phi
				}
			} else {
				fs[i] = v.num
			}
		}
		fa, fb := fs[0], fs[1]
		return value{t: vNum, kind: Angle, node: n, num: func(e *evalCtx) float64 { return DeltaPhi(fa(e), fb(e)) }}, nil
	}
}

// object checks an argument of mass, dr or dphi: an object with the
// fields the function needs, or (for dphi, when needEta is false) an angle.
func (c *compiler) object(n exprNode, fn string, needEta bool) (value, error) {
	v, err := c.expr(n)
	if err != nil {
		return v, err
	}
	want := "an object such as jets[0]"
	if !needEta {
		want = "an object such as jets[0] or an angle such as met_phi"
	}
	switch v.t {
	case vObj:
		cs := &c.sch.colls[v.coll]
		missing := ""
		switch {
		case cs.phi < 0:
			missing = "phi"
		case needEta && cs.eta < 0:
			missing = "eta"
		case fn == "mass" && cs.pt < 0:
			missing = "pt or et"
		}
		if missing != "" {
			return v, &exprError{pos: n.at(), found: fmt.Sprintf("%s, whose objects have no field %s", printExpr(n), missing), expected: fmt.Sprintf("objects with the fields %s needs", fn)}
		}
		return v, nil
	case vNum:
		if !needEta && v.kind == Angle {
			return v, nil
		}
		if !needEta && v.kind == Number && v.isConst {
			return v, nil // a plain number is an angle in radians
		}
	}
	return v, &exprError{pos: n.at(), found: describeValue(v), expected: want + " for " + fn}
}

// kinematic reads the momentum, pseudorapidity and azimuth of one object.
type kinematic struct {
	coll, index, stride, pt, eta, phi int
}

func (c *compiler) kinematics(v value) kinematic {
	cs := &c.sch.colls[v.coll]
	return kinematic{coll: v.coll, index: v.index, stride: len(cs.fields), pt: cs.pt, eta: cs.eta, phi: cs.phi}
}

func (k *kinematic) read(e *evalCtx) (pt, eta, phi float64, ok bool) {
	vals := e.f.colls[k.coll].vals
	base := k.index * k.stride
	if base+k.stride > len(vals) {
		return 0, 0, 0, false
	}
	if k.pt >= 0 {
		pt = vals[base+k.pt]
	}
	if k.eta >= 0 {
		eta = vals[base+k.eta]
	}
	return pt, eta, vals[base+k.phi], true
}

func (c *compiler) count(n *callExpr) (value, error) {
	ref, ok := n.args[0].(*nameRef)
	ci := -1
	if ok {
		ci = c.sch.coll(ref.name)
	}
	if ci < 0 {
		return value{}, &exprError{pos: n.args[0].at(), found: fmt.Sprintf("%q", printExpr(n.args[0])), expected: "a collection as the first argument of count (" + c.collections() + ")"}
	}
	if len(n.args) == 1 {
		return value{t: vNum, kind: Number, node: n, num: func(e *evalCtx) float64 { return float64(e.f.colls[ci].Len()) }}, nil
	}
	c.scope = append(c.scope, ci)
	cond, err := c.condition(n.args[1], "the second argument of count")
	c.scope = c.scope[:len(c.scope)-1]
	if err != nil {
		return cond, err
	}
	f := cond.cond
	return value{t: vNum, kind: Number, node: n, num: func(e *evalCtx) float64 {
		saved := e.cur[ci]
		objs := e.f.colls[ci].Len()
		k := 0
		for i := 0; i < objs; i++ {
			e.cur[ci] = i
			if f(e) {
				k++
			}
		}
		e.cur[ci] = saved
		return float64(k)
	}}, nil
}
