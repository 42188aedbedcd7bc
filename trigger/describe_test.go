package trigger

import (
	"bytes"
	"strings"
	"testing"
)

func TestDescribeMarksOffAndDisabled(t *testing.T) {
	m := mustParse(t, `menu: d
version: 1
rules:
  met-50:  {when: "met > 50 GeV"}
  spare:   {when: "met > 1 TeV", disabled: true}
  monitor: {when: "sumet > 10 GeV", prescale: 3}
prescale_sets:
  quiet: {met-50: off, spare: 4}
streams:
  main: [met-50]
`)
	var b bytes.Buffer
	if err := m.Describe(&b); err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(b.String(), "\n")
	find := func(prefix string) []string {
		for _, l := range lines {
			if strings.HasPrefix(l, prefix+" ") {
				return strings.Fields(l)
			}
		}
		t.Fatalf("no line for %s in\n%s", prefix, b.String())
		return nil
	}
	// name, condition words..., BASE, QUIET, STREAMS
	if f := find("met-50"); strings.Join(f[len(f)-3:], " ") != "1 off main" {
		t.Errorf("met-50: %v", f)
	}
	if f := find("spare"); strings.Join(f[len(f)-4:], " ") != "[disabled] - - -" {
		t.Errorf("spare: %v", f)
	}
	if f := find("monitor"); strings.Join(f[len(f)-3:], " ") != "3 3 -" {
		t.Errorf("monitor: %v", f)
	}
	if !strings.Contains(b.String(), "prescale sets: base, quiet (active)") {
		t.Errorf("active set not marked:\n%s", b.String())
	}
}

func TestCollectionAccess(t *testing.T) {
	c := NewCollection("objs", []Field{{"pt", Energy}, {"eta", Number}})
	c.Add(10, 0.5)
	c.Add(20, -1)
	if c.Len() != 2 || c.At(1, 0) != 20 || c.Name() != "objs" {
		t.Fatalf("len %d, At(1,0) %v", c.Len(), c.At(1, 0))
	}
	if v, ok := c.Value(0, "eta"); !ok || v != 0.5 {
		t.Fatalf("Value(0, eta) = %v, %v", v, ok)
	}
	if _, ok := c.Value(2, "eta"); ok {
		t.Fatal("Value past the end")
	}
	if _, ok := c.Value(0, "phi"); ok {
		t.Fatal("Value of a missing field")
	}
	c.Reset()
	if c.Len() != 0 {
		t.Fatal("Reset kept objects")
	}
	defer func() {
		if recover() == nil {
			t.Fatal("Add with the wrong number of values did not panic")
		}
	}()
	c.Add(1)
}
