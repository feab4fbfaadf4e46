package benchsim

import (
	"bytes"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// A scenario file is bounded (issue 14 item 15: every file kind kermalux
// reads has a size bound): one a byte over MaxScenarioBytes is refused
// naming the file, before the YAML decoder sees it.
func TestLoadScenarioBounded(t *testing.T) {
	p := filepath.Join(t.TempDir(), "huge.yaml")
	if err := os.WriteFile(p, bytes.Repeat([]byte("# x\n"), MaxScenarioBytes/4+1), 0o600); err != nil {
		t.Fatal(err)
	}
	_, err := LoadScenario(p)
	var se *ScenarioError
	if !errors.As(err, &se) || se.File != p || !strings.Contains(err.Error(), "larger than 1 MiB: not a scenario file") {
		t.Errorf("a scenario of %d bytes: %v", MaxScenarioBytes+4, err)
	}
}
