package calib

import (
	"flag"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

var update = flag.Bool("update", false, "rewrite golden files")

// The messages for the malformed example certificates are kept in a golden
// file so that a change in wording is a reviewed change.
func TestMalformedCertificatesGolden(t *testing.T) {
	files, err := filepath.Glob(filepath.Join(certDir, "malformed", "*.yaml"))
	if err != nil || len(files) == 0 {
		t.Fatalf("no malformed examples: %v", err)
	}
	var b strings.Builder
	for _, f := range files {
		_, err := LoadCertificate(f)
		if err == nil {
			t.Errorf("%s: accepted", f)
			continue
		}
		b.WriteString(filepath.ToSlash(err.Error()) + "\n")
	}
	golden := filepath.Join(certDir, "malformed", "errors.golden")
	if *update {
		if err := os.WriteFile(golden, []byte(b.String()), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(golden)
	if err != nil {
		t.Fatal(err)
	}
	if b.String() != string(want) {
		t.Errorf("messages differ from %s:\ngot:\n%s\nwant:\n%s", golden, b.String(), want)
	}
}
