package trigger

import (
	"strconv"
	"strings"
)

// Operator precedence, loosest first; printing adds parentheses exactly
// where the tree needs them, so that the printed form reads back to the
// same tree and two spellings of one tree print alike.
const (
	precOr = 1 + iota
	precAnd
	precNot
	precCompare
	precSum
	precProduct
	precUnary
	precPrimary
)

func precedence(n exprNode) int {
	switch n := n.(type) {
	case *binaryExpr:
		switch n.op {
		case "or":
			return precOr
		case "and":
			return precAnd
		case "+", "-":
			return precSum
		case "*", "/":
			return precProduct
		}
		return precCompare
	case *inExpr:
		return precCompare
	case *unaryExpr:
		if n.op == "not" {
			return precNot
		}
		return precUnary
	}
	return precPrimary
}

// printExpr returns the canonical text of an expression: single spaces
// around binary operators, energies in GeV with the shortest exact decimal,
// minimal parentheses.
func printExpr(n exprNode) string {
	var b strings.Builder
	printNode(&b, n, 0, false)
	return b.String()
}

func printNode(b *strings.Builder, n exprNode, parent int, right bool) {
	p := precedence(n)
	paren := p < parent || (p == parent && (right || p == precCompare) && p != precUnary && p != precNot)
	if paren {
		b.WriteByte('(')
	}
	switch n := n.(type) {
	case *numLit:
		if n.unit != "" {
			b.WriteString(formatEnergy(n.val))
		} else {
			b.WriteString(formatNumber(n.val))
		}
	case *nameRef:
		b.WriteString(n.name)
	case *indexRef:
		b.WriteString(n.coll)
		b.WriteByte('[')
		b.WriteString(strconv.Itoa(n.index))
		b.WriteByte(']')
		if n.field != "" {
			b.WriteByte('.')
			b.WriteString(n.field)
		}
	case *callExpr:
		b.WriteString(n.fn)
		b.WriteByte('(')
		for i, a := range n.args {
			if i > 0 {
				b.WriteString(", ")
			}
			printNode(b, a, 0, false)
		}
		b.WriteByte(')')
	case *unaryExpr:
		if n.op == "not" {
			b.WriteString("not ")
		} else {
			b.WriteString("-")
		}
		printNode(b, n.x, p, true)
	case *binaryExpr:
		printNode(b, n.x, p, false)
		b.WriteByte(' ')
		b.WriteString(n.op)
		b.WriteByte(' ')
		printNode(b, n.y, p, true)
	case *inExpr:
		printNode(b, n.x, precSum, false)
		b.WriteString(" in ")
		printNode(b, n.lo, precSum, false)
		b.WriteString(" .. ")
		printNode(b, n.hi, precSum, false)
	}
	if paren {
		b.WriteByte(')')
	}
}
