package script

import (
	"bytes"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"kermalux/drivers/filepos"
)

// A procedure file is bounded (issue 14 items 11 and 15: every file kind
// kermalux reads has a size bound): one a byte over MaxFileBytes is refused
// naming the file and the bound, before the YAML decoder sees it; one at
// the bound is read and parsed.
func TestLoadBounded(t *testing.T) {
	dir := t.TempDir()
	valid := head + "  - id: a\n    kind: say\n    text: Hi.\n"
	at := filepath.Join(dir, "at.yaml")
	pad := MaxFileBytes - len(valid)
	if err := os.WriteFile(at, []byte(valid+"#"+strings.Repeat("x", pad-2)+"\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	if p, err := Load(at); err != nil || p == nil || p.Name != "p" {
		t.Errorf("a procedure of exactly %d bytes: %v", MaxFileBytes, err)
	}
	over := filepath.Join(dir, "huge.yaml")
	if err := os.WriteFile(over, bytes.Repeat([]byte("# x\n"), MaxFileBytes/4+1), 0o600); err != nil {
		t.Fatal(err)
	}
	_, err := Load(over)
	var fe *filepos.Error
	if !errors.As(err, &fe) || fe.File != over || !strings.Contains(err.Error(), "larger than 1 MiB: not a procedure file") {
		t.Errorf("a procedure of %d bytes: %v", MaxFileBytes+4, err)
	}
}
