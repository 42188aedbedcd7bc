package trigger

import (
	"unicode/utf8"

	"go.yaml.in/yaml/v3"
)

// source is a menu file being parsed, kept so that errors can point at a
// character inside a scalar.
type source struct {
	file  string
	data  []byte
	lines []int // byte offset at which each line starts
}

func newSource(file string, data []byte) *source {
	s := &source{file: file, data: data, lines: []int{0}}
	for i, c := range data {
		if c == '\n' {
			s.lines = append(s.lines, i+1)
		}
	}
	return s
}

// offset returns the byte offset of a 1-based line and character column,
// or -1 if the position is outside the data.
func (s *source) offset(line, col int) int {
	if line < 1 || line > len(s.lines) || col < 1 {
		return -1
	}
	j := s.lines[line-1]
	for c := 1; c < col; c++ {
		if j >= len(s.data) || s.data[j] == '\n' {
			return -1
		}
		_, w := utf8.DecodeRune(s.data[j:])
		j += w
	}
	return j
}

// position returns the 1-based line and character column of byte offset j.
func (s *source) position(j int) (line, col int) {
	lo, hi := 0, len(s.lines)-1
	for lo < hi {
		mid := (lo + hi + 1) / 2
		if s.lines[mid] <= j {
			lo = mid
		} else {
			hi = mid - 1
		}
	}
	return lo + 1, utf8.RuneCount(s.data[s.lines[lo]:j]) + 1
}

// scalarPos returns the file position of byte off of the value of scalar
// node n. It walks the source text of the scalar alongside its value:
// characters must match, runs of white space (line breaks and indentation
// included) may differ, and quoting escapes are decoded. That makes the
// position exact for plain, quoted, literal and folded scalars alike; when
// the two texts cannot be aligned it falls back to the start of the scalar.
func (s *source) scalarPos(n *yaml.Node, off int) (line, col int) {
	line, col = n.Line, n.Column
	if n.Kind != yaml.ScalarNode || off < 0 {
		return line, col
	}
	j := s.offset(n.Line, n.Column)
	if j < 0 {
		return line, col
	}
	val := n.Value
	if off > len(val) {
		off = len(val)
	}
	dq := n.Style&yaml.DoubleQuotedStyle != 0
	sq := n.Style&yaml.SingleQuotedStyle != 0
	switch {
	case dq || sq:
		j++
	case n.Style&(yaml.LiteralStyle|yaml.FoldedStyle) != 0:
		for j < len(s.data) && s.data[j] != '\n' {
			j++
		}
		j++
	}
	d := s.data
	i := 0
	for i < off {
		if j >= len(d) {
			return n.Line, n.Column
		}
		v, c := val[i], d[j]
		switch {
		case dq && c == '\\' && j+1 < len(d):
			e := d[j+1]
			if e == '\n' || e == '\r' {
				// An escaped line break joins the lines and produces nothing.
				j += 2
				for j < len(d) && (d[j] == ' ' || d[j] == '\t' || d[j] == '\n' || d[j] == '\r') {
					j++
				}
				continue
			}
			srcLen, valLen := 2, 1
			switch e {
			case 'x':
				srcLen, valLen = 4, escapedLen(d, j+2, 2)
			case 'u':
				srcLen, valLen = 6, escapedLen(d, j+2, 4)
			case 'U':
				srcLen, valLen = 10, escapedLen(d, j+2, 8)
			case 'N', '_':
				valLen = 2 // U+0085 and U+00A0 are two bytes in UTF-8
			case 'L', 'P':
				valLen = 3 // U+2028 and U+2029
			}
			j += srcLen
			i += valLen
		case sq && c == '\'' && j+1 < len(d) && d[j+1] == '\'':
			j += 2
			i++
		case v == c:
			i++
			j++
		case isSpace(c) && isSpace(v):
			i++
			j++
		case isSpace(c):
			j++
		default:
			return n.Line, n.Column
		}
	}
	// Land on the token itself, not on the white space before it.
	if off < len(val) && !isSpace(val[off]) {
		for j < len(d) && isSpace(d[j]) {
			j++
		}
	}
	if j > len(d) {
		return n.Line, n.Column
	}
	return s.position(j)
}

func isSpace(c byte) bool { return c == ' ' || c == '\t' || c == '\n' || c == '\r' }

// escapedLen returns the UTF-8 length of the code point written as n hex
// digits at d[j:], or 1 if they do not parse.
func escapedLen(d []byte, j, n int) int {
	if j+n > len(d) {
		return 1
	}
	var r rune
	for _, c := range d[j : j+n] {
		switch {
		case c >= '0' && c <= '9':
			r = r*16 + rune(c-'0')
		case c >= 'a' && c <= 'f':
			r = r*16 + rune(c-'a'+10)
		case c >= 'A' && c <= 'F':
			r = r*16 + rune(c-'A'+10)
		default:
			return 1
		}
	}
	if l := utf8.RuneLen(r); l > 0 {
		return l
	}
	return 3 // an invalid code point is replaced by U+FFFD
}
