package stack

import (
	"testing"

	"github.com/bunchsieve/bunchsieve/trigger"
)

// menuWithSets returns a one-rule menu with the named prescale sets and
// active set (none when empty).
func menuWithSets(t *testing.T, name, active string, sets ...string) *trigger.Menu {
	t.Helper()
	text := "menu: " + name + "\nversion: 1\nrules:\n  met-50: {when: \"met > 50 GeV\"}\n"
	if len(sets) > 0 {
		text += "prescale_sets:\n"
		for _, s := range sets {
			text += "  " + s + ": {met-50: 2}\n"
		}
	}
	if active != "" {
		text += "active_set: " + active + "\n"
	}
	m, err := trigger.ParseMenu(name+".yaml", []byte(text))
	if err != nil {
		t.Fatal(err)
	}
	return m
}

// A menu loaded without a named set keeps the set the operator chose when
// it has one of that name, and otherwise starts in its own active set; a
// menu's own active set is never carried over to the next menu.
func TestLoadMenuKeepsTheChosenSet(t *testing.T) {
	host, err := NewHost(HostOptions{})
	if err != nil {
		t.Fatal(err)
	}
	defer host.Close()
	c := NewController(host)
	set := func() string { t.Helper(); return c.Status().PrescaleSet }

	steps := []struct {
		what   string
		menu   *trigger.Menu
		choose string // SetPrescaleSet before loading, if not empty
		named  string // LoadMenu's prescaleSet
		want   string // "" is the menu's active set
	}{
		{what: "first menu", menu: menuWithSets(t, "a", "nominal", "nominal", "quiet"), want: ""},
		{what: "no choice made: the new menu's active set", menu: menuWithSets(t, "b", "busy", "nominal", "busy"), want: ""},
		{what: "chosen set kept", menu: menuWithSets(t, "c", "quiet", "nominal", "quiet"), choose: "nominal", want: "nominal"},
		{what: "kept again", menu: menuWithSets(t, "d", "quiet", "quiet", "nominal"), want: "nominal"},
		{what: "named set wins", menu: menuWithSets(t, "e", "nominal", "nominal", "quiet"), named: "quiet", want: "quiet"},
		{what: "chosen set missing: active set", menu: menuWithSets(t, "f", "busy", "busy"), want: ""},
		{what: "the base set is kept like any other", menu: menuWithSets(t, "g", "nominal", "nominal"), choose: trigger.BaseSet, want: trigger.BaseSet},
	}
	for _, s := range steps {
		if s.choose != "" {
			if err := c.SetPrescaleSet(s.choose); err != nil {
				t.Fatalf("%s: choose %q: %v", s.what, s.choose, err)
			}
		}
		if err := c.LoadMenu(s.menu, s.named); err != nil {
			t.Fatalf("%s: %v", s.what, err)
		}
		if got := set(); got != s.want {
			t.Fatalf("%s: set %q, want %q", s.what, got, s.want)
		}
	}
}
