package calib

import (
	"path/filepath"
	"testing"
)

func TestExampleCertificatesLoad(t *testing.T) {
	files, _ := filepath.Glob("../testdata/certificates/*.yaml")
	if len(files) < 4 {
		t.Fatalf("found %d example certificates, want at least 4", len(files))
	}
	for _, f := range files {
		if _, err := LoadCertificate(f); err != nil {
			t.Errorf("%v", err)
		}
	}
}
