package demo

import (
	"bytes"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// The demo embeds copies of the example files under testdata/ so that it
// runs from any directory; this keeps the copies identical to the originals.
func TestAssetsMatchTestdata(t *testing.T) {
	origin := map[string]string{
		"assets/profiles":               "../../testdata/profiles",
		"assets/certificates":           "../../testdata/certificates",
		"assets/scenarios":              "../../testdata/scenarios",
		"assets/baselines/HV-2291.json": "../../testdata/bench/tollemby-rise-room2-2025-results.json",
	}
	n := 0
	err := fs.WalkDir(assets, "assets", func(p string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		var want string
		if o, ok := origin[p]; ok {
			want = o
		} else if o, ok := origin[filepath.Dir(p)]; ok {
			want = filepath.Join(o, filepath.Base(p))
		} else {
			t.Errorf("%s: no original under testdata/ is known", p)
			return nil
		}
		got, _ := assets.ReadFile(p)
		orig, err := os.ReadFile(want)
		if err != nil {
			t.Errorf("%s: %v", p, err)
			return nil
		}
		if !bytes.Equal(got, orig) {
			t.Errorf("%s differs from %s: copy it again (cp %s %s)", p, want, want, strings.TrimPrefix(p, ""))
		}
		n++
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if n < 5 {
		t.Errorf("only %d embedded files checked", n)
	}
}
