package cli

import (
	"bytes"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// Every subcommand of menu and ctl answers --help and -h with its usage on
// standard output and exit status 0, as the top-level help promises
// ("COMMAND --help lists a command's flags"), and a ctl action does so
// before reading the token or dialling: the token file here does not
// exist and nothing listens on the address.
func TestSubcommandHelp(t *testing.T) {
	noToken := filepath.Join(t.TempDir(), "no-such.token")
	ctl := []string{"ctl", "--addr", "127.0.0.1:1", "--token-file", noToken, "--timeout", "1s"}
	cases := []struct {
		args []string
		want string // in the usage
	}{
		{[]string{"menu"}, "usage: bunchsieve menu check FILE"},
		{[]string{"menu", "check"}, "usage: bunchsieve menu check FILE"},
		{append(ctl[:len(ctl):len(ctl)], "status"), "usage: bunchsieve ctl status"},
		{append(ctl[:len(ctl):len(ctl)], "start"), "usage: bunchsieve ctl start"},
		{append(ctl[:len(ctl):len(ctl)], "stop"), "usage: bunchsieve ctl stop"},
		{append(ctl[:len(ctl):len(ctl)], "menu"), "usage: bunchsieve ctl menu FILE [--set NAME]"},
		{append(ctl[:len(ctl):len(ctl)], "prescale"), "usage: bunchsieve ctl prescale SET"},
		{append(ctl[:len(ctl):len(ctl)], "configure"), "usage: bunchsieve ctl configure"},
		{append(ctl[:len(ctl):len(ctl)], "watch"), "usage: bunchsieve ctl watch"},
	}
	for _, c := range cases {
		for _, help := range []string{"--help", "-h"} {
			args := append(c.args[:len(c.args):len(c.args)], help)
			code, stdout, stderr := runCLI(t, 10*time.Second, args...)
			if code != 0 || stderr != "" || !strings.Contains(stdout, c.want) {
				t.Errorf("bunchsieve %s: exit %d, stderr %q, stdout %q; want exit 0 and a usage with %q",
					strings.Join(args, " "), code, stderr, stdout, c.want)
			}
		}
	}
	// The flags of an action are listed; the connection flags are named as
	// belonging before the action.
	_, stdout, _ := runCLI(t, 10*time.Second, append(ctl[:len(ctl):len(ctl)], "configure", "--help")...)
	for _, want := range []string{"-rate", "-crossings", "-menu", "--addr"} {
		if !strings.Contains(stdout, want) {
			t.Errorf("ctl configure --help lacks %q:\n%s", want, stdout)
		}
	}
}

// Mistakes in a ctl action's arguments are usage errors (exit 2) found
// before the token is read: a prescale set named "--help" or an extra
// argument never reaches the server.
func TestCtlActionArguments(t *testing.T) {
	noToken := filepath.Join(t.TempDir(), "no-such.token")
	ctl := []string{"ctl", "--addr", "127.0.0.1:1", "--token-file", noToken, "--timeout", "1s"}
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"status", "extra"}, `unexpected argument "extra"`},
		{[]string{"start", "now"}, `unexpected argument "now"`},
		{[]string{"prescale"}, "one prescale set name"},
		{[]string{"prescale", "quiet", "loud"}, `unexpected argument "loud"`},
		{[]string{"menu"}, "one menu FILE"},
		{[]string{"watch", "--interval", "1ms"}, "--interval"},
		{[]string{"configure", "--rate", "-1"}, "must not be negative"},
		{[]string{"launch"}, `unknown action "launch"`},
	} {
		args := append(ctl[:len(ctl):len(ctl)], c.args...)
		code, _, stderr := runCLI(t, 10*time.Second, args...)
		if code != 2 || !strings.Contains(stderr, c.want) || strings.Contains(stderr, "token") {
			t.Errorf("bunchsieve %s: exit %d, stderr %q; want exit 2 naming %q", strings.Join(args, " "), code, stderr, c.want)
		}
	}
	// Without the token the calls that change the run still fail, on the
	// token, once their arguments are good.
	code, _, stderr := runCLI(t, 10*time.Second, append(ctl[:len(ctl):len(ctl)], "start")...)
	if code != 1 || !strings.Contains(stderr, "token") {
		t.Errorf("ctl start without a token: exit %d, stderr %q; want exit 1 naming the token", code, stderr)
	}
}

// ctl menu takes --set before or after FILE, as its usage shows.
func TestCtlMenuSetEitherSide(t *testing.T) {
	path := filepath.Join(t.TempDir(), "m.yaml")
	const menu = "menu: m\nversion: 1\nrules:\n  a: {when: \"met > 1 GeV\"}\n"
	if err := os.WriteFile(path, []byte(menu), 0o644); err != nil {
		t.Fatal(err)
	}
	e := &env{stdout: &bytes.Buffer{}, stderr: &bytes.Buffer{}}
	for _, args := range [][]string{{path, "--set", "quiet"}, {"--set", "quiet", path}, {"--set=quiet", path}} {
		req, err := menuRequest(e, args)
		if err != nil {
			t.Errorf("ctl menu %s: %v", strings.Join(args, " "), err)
			continue
		}
		if req.PrescaleSet != "quiet" || req.Menu != menu {
			t.Errorf("ctl menu %s: set %q, menu %q", strings.Join(args, " "), req.PrescaleSet, req.Menu)
		}
	}
	if _, err := menuRequest(e, []string{path, "other.yaml"}); err == nil {
		t.Error("ctl menu with two files: no error")
	}
}

// A bad menu given to ctl menu or ctl configure --menu is reported at its
// file's line and column before anything is sent (the server sees only
// the text and could name no file).
func TestCtlMenuErrorNamesTheFile(t *testing.T) {
	path := filepath.Join(t.TempDir(), "bad.yaml")
	if err := os.WriteFile(path, []byte("menu: m\nversion: 1\nrules:\n  a: {when: \"met > 120\"}\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	e := &env{stdout: &bytes.Buffer{}, stderr: &bytes.Buffer{}}
	_, err := menuRequest(e, []string{path})
	if err == nil || !strings.HasPrefix(err.Error(), path+":4:") {
		t.Errorf("ctl menu: %v; want an error at %s:4:", err, path)
	}
	_, err = configureRequest(e, []string{"--menu", path})
	if err == nil || !strings.HasPrefix(err.Error(), path+":4:") {
		t.Errorf("ctl configure --menu: %v; want an error at %s:4:", err, path)
	}
}
