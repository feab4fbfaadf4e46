package main

import (
	"bytes"
	"errors"
	"strings"
	"testing"
)

// The example certificates under testdata/certificates are invented; their
// dates are what the table expects.
func TestCertsStanding(t *testing.T) {
	tests := []struct {
		args     []string
		on       string
		wantCode int
		want     []string
	}{
		{[]string{"../../testdata/certificates"}, "2026-12-02", exitOK, []string{"due in 16 days", "out of date, superseded"}},
		{[]string{"../../testdata/certificates/veltrane-kr40-1187-expired.yaml"}, "2026-12-02", exitFailure, []string{"OUT OF DATE"}},
		{[]string{"../../testdata/certificates/vessoric-lm9-5521.yaml"}, "2027-05-05", exitFailure, []string{"OUT OF DATE"}},
	}
	for _, tc := range tests {
		var out bytes.Buffer
		cmd, _, err := root.Find([]string{"certs"})
		if err != nil {
			t.Fatal(err)
		}
		cmd.SetOut(&out)
		cmd.SetErr(&out)
		err = runCerts(cmd, certsOptions{on: tc.on}, tc.args)
		code := exitOK
		var ee *exitError
		if errors.As(err, &ee) {
			code = ee.code
		}
		if code != tc.wantCode {
			t.Errorf("%v on %s: exit %d (%v), want %d\n%s", tc.args, tc.on, code, err, tc.wantCode, out.String())
		}
		for _, w := range tc.want {
			if !strings.Contains(out.String(), w) {
				t.Errorf("%v on %s: output lacks %q:\n%s", tc.args, tc.on, w, out.String())
			}
		}
	}
}
