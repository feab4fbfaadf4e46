package main

import (
	"bytes"
	"strings"
	"testing"

	"github.com/spf13/cobra"
	"github.com/spf13/pflag"
)

// resetFlags puts every flag back to its default: the command tree is
// global, and one Execute's flags would otherwise leak into the next.
func resetFlags(c *cobra.Command) {
	c.Flags().VisitAll(func(f *pflag.Flag) {
		if sv, ok := f.Value.(pflag.SliceValue); ok {
			_ = sv.Replace(nil)
		} else {
			_ = f.Value.Set(f.DefValue)
		}
		f.Changed = false
	})
	for _, sub := range c.Commands() {
		resetFlags(sub)
	}
}

// The exit-code contract of `kermalux check` (0 valid, 1 invalid with
// file:line:col reasons on stderr, 2 usage), run through the same entry
// point as the binary.
func TestCheckExitCodes(t *testing.T) {
	tests := []struct {
		args   []string
		code   int
		stderr string
	}{
		{[]string{"check", "--builtin"}, exitOK, ""},
		{[]string{"check", "../../procedures/builtin/conversion-factor.yaml", "--modes", "32cm,25cm"}, exitOK, ""},
		{[]string{"check", "../../testdata/procedures/bad/no-safety.yaml"}, exitFailure, "no-safety.yaml:"},
		{[]string{"check", "../../testdata/procedures/bad/bad-unit.yaml"}, exitFailure, "bad-unit.yaml:13:21:"},
		{[]string{"check", "--builtin", "--bench", "../../testdata/bench/demo-sim.yaml"}, exitOK, ""},
		{[]string{"check", "../../procedures/builtin/conversion-factor.yaml", "--bench", "../../testdata/bench/photometer-only.yaml"}, exitFailure, "no configured meter reports air_kerma_rate"},
		// A site's own texts with no translation into the language asked
		// are refused, each named by file, line and text; the lines the
		// built-in checklist shares are translated.
		{[]string{"check", "../../testdata/procedures/good/local-safety.yaml"}, exitOK, ""},
		{[]string{"check", "--language", "de", "../../testdata/procedures/good/local-safety.yaml"}, exitFailure, `local-safety.yaml:14:9: line 5 of step list has no translation into "de": add it to a catalog (en: "The mobile shield is in place.")`},
		{[]string{"check", "--language", "fr", "../../testdata/procedures/good/local-safety.yaml"}, exitFailure, `local-safety.yaml:2:1: title of procedure`},
		{[]string{"check", "--builtin", "--language", "fr"}, exitOK, ""},
		{[]string{"check", "--builtin", "--language", "xx"}, exitUsage, "no catalog for this language"},
		{[]string{"check"}, exitUsage, ""},
		{[]string{"check", "--no-such-flag", "x.yaml"}, exitUsage, "unknown flag"},
	}
	for _, tc := range tests {
		var out, errb bytes.Buffer
		resetFlags(root)
		code := execute(tc.args, &out, &errb)
		if code != tc.code {
			t.Errorf("kermalux %s: exit %d, want %d\nstderr: %s", strings.Join(tc.args, " "), code, tc.code, errb.String())
		}
		if tc.stderr != "" && !strings.Contains(errb.String(), tc.stderr) {
			t.Errorf("kermalux %s: stderr lacks %q:\n%s", strings.Join(tc.args, " "), tc.stderr, errb.String())
		}
	}
}
