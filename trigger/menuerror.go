package trigger

import (
	"fmt"
	"strings"
)

// MenuError is the error ParseMenu and LoadMenu return for a bad menu. It
// points at the offending token: Line and Col are 1-based, Col counts
// characters. Rule names the rule the error is inside, or is empty.
type MenuError struct {
	File      string
	Line, Col int
	Found     string
	Expected  string
	Rule      string
}

// Error formats the error as
// file:line:col: rule "x": found ..., expected ...
// leaving out the rule part when Rule is empty.
func (e *MenuError) Error() string {
	var b strings.Builder
	fmt.Fprintf(&b, "%s:%d:%d: ", e.File, e.Line, e.Col)
	if e.Rule != "" {
		fmt.Fprintf(&b, "rule %q: ", e.Rule)
	}
	fmt.Fprintf(&b, "found %s, expected %s", e.Found, e.Expected)
	return b.String()
}
