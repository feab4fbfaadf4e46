package main

import (
	"go/parser"
	"go/token"
	"io/fs"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

// layerOrder is the project's layering, lowest first (DEVELOPERS.md,
// "Layers"): a package may import its own layer and the ones below it,
// never one above.
var layerOrder = []string{"drivers", "calib", "procedures", "firmware-host", "cmd"}

func layerOf(importPath string) int {
	rest, ok := strings.CutPrefix(importPath, "kermalux/")
	if !ok {
		return -1
	}
	top, _, _ := strings.Cut(rest, "/")
	for i, l := range layerOrder {
		if l == top {
			return i
		}
	}
	return -1
}

// TestLayersHold parses every non-test Go file of the module and fails on
// an import that runs back up the layer order, naming the file and the
// import.
func TestLayersHold(t *testing.T) {
	root := filepath.Join("..", "..")
	fset := token.NewFileSet()
	checked := 0
	err := filepath.WalkDir(root, func(path string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		if d.IsDir() {
			name := d.Name()
			if path != root && (strings.HasPrefix(name, ".") || name == "testdata") {
				return filepath.SkipDir
			}
			return nil
		}
		if !strings.HasSuffix(path, ".go") || strings.HasSuffix(path, "_test.go") {
			return nil
		}
		rel, _ := filepath.Rel(root, path)
		from := layerOf("kermalux/" + filepath.ToSlash(rel))
		if from < 0 {
			return nil
		}
		f, err := parser.ParseFile(fset, path, nil, parser.ImportsOnly)
		if err != nil {
			t.Errorf("%s: %v", rel, err)
			return nil
		}
		checked++
		for _, imp := range f.Imports {
			p, _ := strconv.Unquote(imp.Path.Value)
			if to := layerOf(p); to > from {
				t.Errorf("%s imports %s: %s may not import %s (layers, lowest first: %s)",
					rel, p, layerOrder[from], layerOrder[to], strings.Join(layerOrder, " < "))
			}
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if checked < 50 {
		t.Fatalf("only %d files checked: is the walk rooted at the module?", checked)
	}
}

// TestLayerOf pins the classification the layer test relies on.
func TestLayerOf(t *testing.T) {
	for _, c := range []struct {
		path string
		want int
	}{
		{"kermalux/drivers/scpi", 0},
		{"kermalux/calib", 1},
		{"kermalux/procedures/engine", 2},
		{"kermalux/firmware-host/journal", 3},
		{"kermalux/cmd/kermalux", 4},
		{"fmt", -1},
		{"kermalux/testdata/x", -1},
	} {
		if got := layerOf(c.path); got != c.want {
			t.Errorf("layerOf(%q) = %d, want %d", c.path, got, c.want)
		}
	}
}
