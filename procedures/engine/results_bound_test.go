package engine

import (
	"bytes"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"kermalux/drivers/filepos"
)

// A results.json read back as a baseline is bounded (issue 14 item 15:
// every file kind kermalux reads has a size bound): a file a byte over
// MaxResultsBytes is refused naming the file, before it is decoded.
func TestReadResultsBounded(t *testing.T) {
	p := filepath.Join(t.TempDir(), "results.json")
	body := append([]byte(`{"results":[]}`), bytes.Repeat([]byte{' '}, MaxResultsBytes)...)
	if err := os.WriteFile(p, body[:MaxResultsBytes+1], 0o600); err != nil {
		t.Fatal(err)
	}
	_, err := ReadResults(p)
	var fe *filepos.Error
	if !errors.As(err, &fe) || fe.File != p || !strings.Contains(err.Error(), "larger than 4 MiB: not a results file") {
		t.Errorf("a results file of %d bytes: %v", MaxResultsBytes+1, err)
	}
	if err := os.WriteFile(p, body[:MaxResultsBytes], 0o600); err != nil {
		t.Fatal(err)
	}
	if _, err := ReadResults(p); err != nil {
		t.Errorf("a results file at the bound: %v", err)
	}
}
