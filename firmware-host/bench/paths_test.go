package bench

import (
	"os"
	"path/filepath"
	"testing"
)

// Every relative path in a bench file (keys:, journal:, profiles,
// certificates, baseline, a sequence script) is resolved against the
// bench file's folder, not the current directory: running from another
// folder must not create a new board key there (issue: "journal belongs
// to another board").
func TestRelativePathsFollowTheBenchFile(t *testing.T) {
	root := t.TempDir()
	site := filepath.Join(root, "site")
	if err := os.MkdirAll(filepath.Join(site, "procs"), 0o755); err != nil {
		t.Fatal(err)
	}
	for _, f := range []string{"two-modes.yaml", "local-safety.yaml"} {
		src, err := os.ReadFile("../../testdata/procedures/good/" + f)
		if err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(filepath.Join(site, "procs", f), src, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	text := `site: S
intensifier:
  field_modes:
    - {name: 32cm, diameter_mm: 320}
    - {name: 17cm, diameter_mm: 170}
meters:
  - {name: dosimeter, role: dosimeter, profile: profiles/d.yaml}
  - {name: photometer, role: photometer, profile: profiles/p.yaml}
journal: data/journal.db
keys: data/board-key
sequence: procs/two-modes.yaml
`
	if err := os.WriteFile(filepath.Join(site, "bench.yaml"), []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
	other := filepath.Join(root, "elsewhere")
	if err := os.Mkdir(other, 0o755); err != nil {
		t.Fatal(err)
	}
	t.Chdir(root)
	b, err := Load("site/bench.yaml")
	if err != nil {
		t.Fatal(err)
	}
	// Moving on to another folder after loading changes nothing.
	t.Chdir(other)
	for _, c := range []struct{ got, want string }{
		{b.KeyDir(), filepath.Join(site, "data", "board-key")},
		{b.Rel(b.Journal), filepath.Join(site, "data", "journal.db")},
		{b.Rel(b.Meters[0].Profile), filepath.Join(site, "profiles", "d.yaml")},
	} {
		if c.got != c.want {
			t.Errorf("resolved to %s, want %s", c.got, c.want)
		}
	}
	proc, err := b.Procedure("")
	if err != nil {
		t.Fatalf("the bench's sequence, relative to the bench file: %v", err)
	}
	if len(proc.Steps) == 0 {
		t.Error("no steps")
	}
}
