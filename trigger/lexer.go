package trigger

import (
	"fmt"
	"unicode/utf8"
)

// tokKind is the kind of a token of the expression language.
type tokKind uint8

const (
	tEOF tokKind = iota
	tNum
	tIdent
	tLParen
	tRParen
	tLBrack
	tRBrack
	tComma
	tDot
	tRange // ..
	tPlus
	tMinus
	tStar
	tSlash
	tLT
	tLE
	tGT
	tGE
	tEQ
	tNE
	tBad // a character that starts no token
)

var tokText = [...]string{
	tEOF: "end of expression", tNum: "number", tIdent: "name",
	tLParen: "(", tRParen: ")", tLBrack: "[", tRBrack: "]", tComma: ",",
	tDot: ".", tRange: "..", tPlus: "+", tMinus: "-", tStar: "*", tSlash: "/",
	tLT: "<", tLE: "<=", tGT: ">", tGE: ">=", tEQ: "==", tNE: "!=", tBad: "character",
}

// token is one token; pos and end are byte offsets in the expression.
type token struct {
	kind     tokKind
	pos, end int
	text     string
}

// describe renders the token for a "found ..." message.
func (t token) describe() string {
	switch t.kind {
	case tEOF:
		return "end of expression"
	case tNum:
		return fmt.Sprintf("number %s", t.text)
	case tIdent:
		return fmt.Sprintf("%q", t.text)
	case tBad:
		return fmt.Sprintf("character %q", t.text)
	}
	return fmt.Sprintf("%q", t.text)
}

// lex splits an expression into tokens, ending with one tEOF token. It
// never fails: a character that starts no token becomes a tBad token for
// the parser to report.
func lex(s string) []token {
	var toks []token
	i := 0
	for {
		for i < len(s) && isSpace(s[i]) {
			i++
		}
		if i >= len(s) {
			return append(toks, token{kind: tEOF, pos: len(s), end: len(s)})
		}
		start := i
		c := s[i]
		kind := tBad
		switch {
		case c >= '0' && c <= '9':
			i = scanNumber(s, i)
			kind = tNum
		case isIdentStart(c):
			for i < len(s) && isIdentChar(s[i]) {
				i++
			}
			kind = tIdent
		default:
			two := ""
			if i+1 < len(s) {
				two = s[i : i+2]
			}
			switch two {
			case "..":
				kind, i = tRange, i+2
			case "<=":
				kind, i = tLE, i+2
			case ">=":
				kind, i = tGE, i+2
			case "==":
				kind, i = tEQ, i+2
			case "!=":
				kind, i = tNE, i+2
			}
			if kind == tBad {
				i++
				switch c {
				case '(':
					kind = tLParen
				case ')':
					kind = tRParen
				case '[':
					kind = tLBrack
				case ']':
					kind = tRBrack
				case ',':
					kind = tComma
				case '.':
					kind = tDot
				case '+':
					kind = tPlus
				case '-':
					kind = tMinus
				case '*':
					kind = tStar
				case '/':
					kind = tSlash
				case '<':
					kind = tLT
				case '>':
					kind = tGT
				default:
					_, w := utf8.DecodeRuneInString(s[start:])
					i = start + w
				}
			}
		}
		toks = append(toks, token{kind: kind, pos: start, end: i, text: s[start:i]})
	}
}

// scanNumber scans digits [. digits] [e [+-] digits] from s[i]. A '.' not
// followed by a digit is left alone, so "1..2" is 1, .., 2.
func scanNumber(s string, i int) int {
	digits := func() {
		for i < len(s) && s[i] >= '0' && s[i] <= '9' {
			i++
		}
	}
	digits()
	if i+1 < len(s) && s[i] == '.' && s[i+1] >= '0' && s[i+1] <= '9' {
		i++
		digits()
	}
	if i < len(s) && (s[i] == 'e' || s[i] == 'E') {
		j := i + 1
		if j < len(s) && (s[j] == '+' || s[j] == '-') {
			j++
		}
		if j < len(s) && s[j] >= '0' && s[j] <= '9' {
			i = j
			digits()
		}
	}
	return i
}

func isIdentStart(c byte) bool {
	return c >= 'a' && c <= 'z' || c >= 'A' && c <= 'Z' || c == '_'
}

func isIdentChar(c byte) bool {
	return isIdentStart(c) || c >= '0' && c <= '9'
}
