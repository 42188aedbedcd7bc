package trigger

import (
	"fmt"
	"io"
	"strconv"
	"strings"
	"text/tabwriter"
)

// Describe writes a human listing of the menu: its identity, the feature
// settings, and one line per rule with its canonical condition, its
// prescale under every set ("off" when switched off, "-" for a disabled
// rule) and the streams it feeds.
func (m *Menu) Describe(w io.Writer) error {
	var b strings.Builder
	fmt.Fprintf(&b, "menu %s (language version %d, hash %s)\n", m.Name, m.Version, m.Hash)
	b.WriteString("features:\n")
	for _, f := range m.features {
		kind, rest, _ := strings.Cut(f, " ")
		if kind == "collection" {
			rest = strings.Replace(rest, " ", ": ", 1)
		} else {
			rest = kind + ": " + rest
		}
		fmt.Fprintf(&b, "  %s\n", rest)
	}
	sets := m.SetNames()
	marked := make([]string, len(sets))
	for i, s := range sets {
		marked[i] = s
		if s == m.ActiveSet {
			marked[i] += " (active)"
		}
	}
	fmt.Fprintf(&b, "prescale sets: %s\n\n", strings.Join(marked, ", "))

	tw := tabwriter.NewWriter(&b, 0, 4, 2, ' ', 0)
	fmt.Fprintf(tw, "RULE\tCONDITION")
	for _, s := range sets {
		fmt.Fprintf(tw, "\t%s", strings.ToUpper(s))
	}
	fmt.Fprintf(tw, "\tSTREAMS\n")
	all := make([][]int, len(sets))
	for i, s := range sets {
		all[i], _ = m.Prescales(s)
	}
	for ri, r := range m.Rules {
		cond := r.When
		if r.PassThrough() {
			cond = fmt.Sprintf("every event (keep_fraction %s)", formatNumber(r.KeepFraction))
		}
		if r.Disabled {
			cond += " [disabled]"
		}
		fmt.Fprintf(tw, "%s\t%s", r.Name, cond)
		for i := range sets {
			p := all[i][ri]
			switch {
			case r.Disabled:
				fmt.Fprint(tw, "\t-")
			case p == 0:
				fmt.Fprint(tw, "\toff")
			default:
				fmt.Fprintf(tw, "\t%s", strconv.Itoa(p))
			}
		}
		var streams []string
		for _, st := range m.Streams {
			if contains(st.Rules, r.Name) {
				streams = append(streams, st.Name)
			}
		}
		if len(streams) == 0 {
			streams = []string{"-"}
		}
		fmt.Fprintf(tw, "\t%s\n", strings.Join(streams, ", "))
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	_, err := io.WriteString(w, b.String())
	return err
}
