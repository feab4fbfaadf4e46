package journal

import (
	"bytes"
	"crypto/ed25519"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// A mark file is read at most to its two slots (issue 14 item 11): a
// larger one is refused naming the file and the bound, not read whole.
func TestReadMarkBounded(t *testing.T) {
	jp := filepath.Join(t.TempDir(), "journal.db")
	if err := os.WriteFile(MarkPath(jp), bytes.Repeat([]byte{'x'}, 2*markSlot+1), 0o600); err != nil {
		t.Fatal(err)
	}
	pub, _, _ := ed25519.GenerateKey(nil)
	_, err := ReadMark(jp, pub)
	if err == nil || !strings.Contains(err.Error(), MarkPath(jp)) || !strings.Contains(err.Error(), "larger than 2 KiB") {
		t.Errorf("a mark file of %d bytes: %v", 2*markSlot+1, err)
	}
}
