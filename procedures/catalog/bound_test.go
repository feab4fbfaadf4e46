package catalog

import (
	"bytes"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"kermalux/drivers/filepos"
)

// A site's catalog file is bounded (issue 14 items 11 and 15: every file
// kind kermalux reads has a size bound): one a byte over MaxFileBytes is
// refused naming the file and the bound, before the YAML decoder sees it; one at
// the bound is read.
func TestLoadBounded(t *testing.T) {
	dir := t.TempDir()
	at := filepath.Join(dir, "at.yaml")
	valid := "language: de\ndecimal: \",\"\n"
	if err := os.WriteFile(at, []byte(valid+"#"+strings.Repeat("x", MaxFileBytes-len(valid)-2)+"\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	if c, err := Load("de", at); err != nil || c == nil {
		t.Errorf("a catalog of exactly %d bytes: %v", MaxFileBytes, err)
	}
	p := filepath.Join(dir, "huge.yaml")
	if err := os.WriteFile(p, bytes.Repeat([]byte("# x\n"), MaxFileBytes/4+1), 0o600); err != nil {
		t.Fatal(err)
	}
	_, err := Load("de", p)
	var fe *filepos.Error
	if !errors.As(err, &fe) || fe.File != p || !strings.Contains(err.Error(), "larger than 1 MiB: not a catalog file") {
		t.Errorf("a catalog of %d bytes: %v", MaxFileBytes+4, err)
	}
}
