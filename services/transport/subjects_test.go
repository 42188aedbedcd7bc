package transport

import "testing"

// ParseFragments reads back what Fragments makes, for the default and a
// dotted prefix, and refuses subjects of another kind or prefix; every
// fragment subject matches AllFragments' wildcard (its literal part).
func TestParseFragments(t *testing.T) {
	for _, s := range []Subjects{{}, {Prefix: "a.b"}} {
		for _, c := range []struct {
			part int
			src  uint32
		}{{0, 1}, {3, 127}, {65535, 4294967295}} {
			subj := s.Fragments(c.part, c.src)
			p, src, ok := s.ParseFragments(subj)
			if !ok || p != c.part || src != c.src {
				t.Errorf("%s: share %d source %d, ok %v; want %d, %d", subj, p, src, ok, c.part, c.src)
			}
			if w := s.AllFragments(); subj[:len(w)-1] != w[:len(w)-1] {
				t.Errorf("%s is not under %s", subj, w)
			}
		}
		for _, bad := range []string{s.Built(), s.Fragments(1, 2) + ".3", s.prefix() + ".frag.x.2", s.prefix() + ".frag.1", s.prefix() + ".frag.65536.2", "other.frag.1.2"} {
			if _, _, ok := s.ParseFragments(bad); ok {
				t.Errorf("prefix %q: %s parsed as a fragment subject", s.Prefix, bad)
			}
		}
	}
}
