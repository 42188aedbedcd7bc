package trigger

import (
	"fmt"
)

// The syntax tree of a condition. Offsets are bytes into the expression.

type exprNode interface{ at() int }

// numLit is a number, in GeV when it carries an energy unit.
type numLit struct {
	pos    int
	text   string // as written, without the unit
	val    float64
	unit   string // "" for a plain number
	unitAt int
}

// nameRef is a bare name: a scalar feature, a collection, a field of the
// object of an enclosing count(), or the constant pi.
type nameRef struct {
	pos  int
	name string
}

// indexRef is coll[index] or coll[index].field.
type indexRef struct {
	pos     int
	coll    string
	index   int
	indexAt int
	field   string // "" for the object itself
	fieldAt int
}

type callExpr struct {
	pos  int
	fn   string
	args []exprNode
}

// unaryExpr is -x or not x.
type unaryExpr struct {
	pos int
	op  string
	x   exprNode
}

// binaryExpr is x op y for arithmetic, comparisons, and, or.
type binaryExpr struct {
	pos  int // of the operator
	op   string
	x, y exprNode
}

// inExpr is x in lo .. hi.
type inExpr struct {
	pos       int // of "in"
	x, lo, hi exprNode
}

func (n *numLit) at() int     { return n.pos }
func (n *nameRef) at() int    { return n.pos }
func (n *indexRef) at() int   { return n.pos }
func (n *callExpr) at() int   { return n.pos }
func (n *unaryExpr) at() int  { return n.pos }
func (n *binaryExpr) at() int { return n.pos }
func (n *inExpr) at() int     { return n.pos }

// exprError is an error at byte offset pos of an expression.
type exprError struct {
	pos             int
	found, expected string
}

func (e *exprError) Error() string {
	return fmt.Sprintf("offset %d: found %s, expected %s", e.pos, e.found, e.expected)
}

// maxDepth bounds nesting so that a hostile expression cannot exhaust the
// stack.
const maxDepth = 64

var keywords = map[string]bool{"and": true, "or": true, "not": true, "in": true}

type parser struct {
	toks  []token
	i     int
	depth int
}

// parseExpr parses a whole condition or quantity.
func parseExpr(src string) (exprNode, error) {
	p := &parser{toks: lex(src)}
	n, err := p.or()
	if err != nil {
		return nil, err
	}
	if t := p.peek(); t.kind != tEOF {
		return nil, p.unexpected(t, "an operator such as and, or, >, or the end of the expression")
	}
	return n, nil
}

func (p *parser) peek() token { return p.toks[p.i] }

func (p *parser) next() token {
	t := p.toks[p.i]
	if t.kind != tEOF {
		p.i++
	}
	return t
}

func (p *parser) isWord(w string) bool {
	t := p.peek()
	return t.kind == tIdent && t.text == w
}

func (p *parser) unexpected(t token, expected string) error {
	return &exprError{pos: t.pos, found: t.describe(), expected: expected}
}

func (p *parser) enter() error {
	p.depth++
	if p.depth > maxDepth {
		return &exprError{pos: p.peek().pos, found: "an expression nested too deeply", expected: fmt.Sprintf("at most %d levels of nesting", maxDepth)}
	}
	return nil
}

func (p *parser) or() (exprNode, error) {
	x, err := p.and()
	if err != nil {
		return nil, err
	}
	for p.isWord("or") {
		op := p.next()
		y, err := p.and()
		if err != nil {
			return nil, err
		}
		x = &binaryExpr{pos: op.pos, op: "or", x: x, y: y}
	}
	return x, nil
}

func (p *parser) and() (exprNode, error) {
	x, err := p.not()
	if err != nil {
		return nil, err
	}
	for p.isWord("and") {
		op := p.next()
		y, err := p.not()
		if err != nil {
			return nil, err
		}
		x = &binaryExpr{pos: op.pos, op: "and", x: x, y: y}
	}
	return x, nil
}

func (p *parser) not() (exprNode, error) {
	if p.isWord("not") {
		if err := p.enter(); err != nil {
			return nil, err
		}
		defer func() { p.depth-- }()
		op := p.next()
		x, err := p.not()
		if err != nil {
			return nil, err
		}
		return &unaryExpr{pos: op.pos, op: "not", x: x}, nil
	}
	return p.comparison()
}

func (p *parser) comparison() (exprNode, error) {
	x, err := p.sum()
	if err != nil {
		return nil, err
	}
	t := p.peek()
	switch t.kind {
	case tLT, tLE, tGT, tGE, tEQ, tNE:
		p.next()
		y, err := p.sum()
		if err != nil {
			return nil, err
		}
		if n := p.peek(); isComparison(n) {
			return nil, p.unexpected(n, "and or or between comparisons (a < x < b is written x in a .. b)")
		}
		return &binaryExpr{pos: t.pos, op: t.text, x: x, y: y}, nil
	}
	if p.isWord("in") {
		in := p.next()
		lo, err := p.sum()
		if err != nil {
			return nil, err
		}
		if r := p.peek(); r.kind != tRange {
			return nil, p.unexpected(r, "\"..\" between the ends of the window (x in a .. b)")
		}
		p.next()
		hi, err := p.sum()
		if err != nil {
			return nil, err
		}
		if n := p.peek(); isComparison(n) {
			return nil, p.unexpected(n, "and or or after a window")
		}
		return &inExpr{pos: in.pos, x: x, lo: lo, hi: hi}, nil
	}
	return x, nil
}

func isComparison(t token) bool {
	switch t.kind {
	case tLT, tLE, tGT, tGE, tEQ, tNE:
		return true
	}
	return t.kind == tIdent && t.text == "in"
}

func (p *parser) sum() (exprNode, error) {
	x, err := p.product()
	if err != nil {
		return nil, err
	}
	for {
		t := p.peek()
		if t.kind != tPlus && t.kind != tMinus {
			return x, nil
		}
		p.next()
		y, err := p.product()
		if err != nil {
			return nil, err
		}
		x = &binaryExpr{pos: t.pos, op: t.text, x: x, y: y}
	}
}

func (p *parser) product() (exprNode, error) {
	x, err := p.unary()
	if err != nil {
		return nil, err
	}
	for {
		t := p.peek()
		if t.kind != tStar && t.kind != tSlash {
			return x, nil
		}
		p.next()
		y, err := p.unary()
		if err != nil {
			return nil, err
		}
		x = &binaryExpr{pos: t.pos, op: t.text, x: x, y: y}
	}
}

func (p *parser) unary() (exprNode, error) {
	if t := p.peek(); t.kind == tMinus {
		if err := p.enter(); err != nil {
			return nil, err
		}
		defer func() { p.depth-- }()
		p.next()
		x, err := p.unary()
		if err != nil {
			return nil, err
		}
		return &unaryExpr{pos: t.pos, op: "-", x: x}, nil
	}
	return p.primary()
}

const operandExpected = "a number, a name such as met, a function such as count(...), or ("

func (p *parser) primary() (exprNode, error) {
	t := p.next()
	switch t.kind {
	case tNum:
		return p.number(t)
	case tLParen:
		if err := p.enter(); err != nil {
			return nil, err
		}
		x, err := p.or()
		if err != nil {
			return nil, err
		}
		p.depth--
		if c := p.peek(); c.kind != tRParen {
			return nil, p.unexpected(c, "\")\" to close the \"(\"")
		}
		p.next()
		return x, nil
	case tIdent:
		if keywords[t.text] {
			return nil, p.unexpected(t, operandExpected)
		}
		if isNonFiniteWord(t.text) {
			return nil, &exprError{pos: t.pos, found: fmt.Sprintf("%q", t.text), expected: "a finite number"}
		}
		switch p.peek().kind {
		case tLParen:
			return p.call(t)
		case tLBrack:
			return p.index(t)
		case tDot:
			d := p.peek()
			return nil, &exprError{pos: d.pos, found: fmt.Sprintf("\".\" after %q", t.text), expected: fmt.Sprintf("an index first, as in %s[0].et", t.text)}
		}
		return &nameRef{pos: t.pos, name: t.text}, nil
	}
	return nil, p.unexpected(t, operandExpected)
}

// number reads a literal and its optional unit.
func (p *parser) number(t token) (exprNode, error) {
	n := &numLit{pos: t.pos, text: t.text}
	u := p.peek()
	shift := 0
	if u.kind == tIdent && !keywords[u.text] {
		sh, ok := energyUnits[u.text]
		if !ok {
			return nil, &exprError{pos: u.pos, found: fmt.Sprintf("unit %q", u.text), expected: unitsExpected + " (or an operator)"}
		}
		p.next()
		n.unit, n.unitAt, shift = u.text, u.pos, sh
	}
	v, ok := parseScaled(t.text, shift)
	if !ok {
		return nil, &exprError{pos: t.pos, found: fmt.Sprintf("number %s, which is out of range", t.text), expected: "a finite number"}
	}
	n.val = v
	return n, nil
}

func (p *parser) call(name token) (exprNode, error) {
	if err := p.enter(); err != nil {
		return nil, err
	}
	defer func() { p.depth-- }()
	p.next() // (
	c := &callExpr{pos: name.pos, fn: name.text}
	if p.peek().kind == tRParen {
		p.next()
		return c, nil
	}
	for {
		a, err := p.or()
		if err != nil {
			return nil, err
		}
		c.args = append(c.args, a)
		switch t := p.next(); t.kind {
		case tComma:
			continue
		case tRParen:
			return c, nil
		default:
			return nil, p.unexpected(t, fmt.Sprintf("\",\" or \")\" in the arguments of %s", name.text))
		}
	}
}

func (p *parser) index(coll token) (exprNode, error) {
	p.next() // [
	n := &indexRef{pos: coll.pos, coll: coll.text}
	t := p.next()
	n.indexAt = t.pos
	if t.kind != tNum || !isDigits(t.text) {
		if t.kind == tMinus {
			return nil, &exprError{pos: t.pos, found: "a negative index", expected: "an index 0, 1, 2, ... (objects are sorted by decreasing E_T)"}
		}
		return nil, p.unexpected(t, "an index 0, 1, 2, ... (objects are sorted by decreasing E_T)")
	}
	if len(t.text) > 6 {
		return nil, &exprError{pos: t.pos, found: fmt.Sprintf("index %s", t.text), expected: "an index below 1000000"}
	}
	for _, c := range t.text {
		n.index = n.index*10 + int(c-'0')
	}
	if c := p.next(); c.kind != tRBrack {
		return nil, p.unexpected(c, "\"]\" after the index")
	}
	if p.peek().kind == tDot {
		p.next()
		f := p.next()
		if f.kind != tIdent {
			return nil, p.unexpected(f, "a field name after \".\", such as et")
		}
		n.field, n.fieldAt = f.text, f.pos
	}
	return n, nil
}

func isDigits(s string) bool {
	for i := 0; i < len(s); i++ {
		if s[i] < '0' || s[i] > '9' {
			return false
		}
	}
	return s != ""
}
