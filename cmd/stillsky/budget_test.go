package main

import (
	"strings"
	"testing"
)

// Bad input to budget: one line naming the problem, exit status 1.
func TestBudgetBadInput(t *testing.T) {
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"budget", "--scenario", "no-such-scenario"}, `scenario "no-such-scenario"`},
		{[]string{"budget", "--scenario", "small", "--gain", "2.5"}, "unstable"},
		{[]string{"budget", "--scenario", "small", "--gain", "-0.1"}, "gain -0.1"},
		{[]string{"budget", "--scenario", "small", "--leak", "1"}, "leak 1"},
		{[]string{"budget", "--scenario", "small", "--simulate", "--seeds", "1,x"}, "--seeds"},
		{[]string{"budget", "--scenario", "small", "--simulate", "--frames", "10"}, "frames 10"},
	} {
		t.Run(strings.Join(c.args[1:], " "), func(t *testing.T) {
			stderr, code := runMain(t, c.args...)
			if code != 1 || strings.Count(stderr, "\n") != 1 || !strings.Contains(stderr, c.want) {
				t.Errorf("%v: exit %d, stderr %q: want one line with %q and exit 1", c.args, code, stderr, c.want)
			}
		})
	}
}
