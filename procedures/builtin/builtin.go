// Package builtin holds the procedures that come with kermalux, as script
// files (see procedures/script/FORMAT.md) embedded in the binary. It only
// lists and reads them; package script parses and checks them.
package builtin

import (
	"embed"
	"fmt"
	"io/fs"
	"sort"
	"strings"
)

//go:embed *.yaml
var files embed.FS

// FS is the built-in scripts, one NAME.yaml file per procedure.
var FS fs.FS = files

// Names lists the built-in procedures' names, sorted.
func Names() []string {
	entries, _ := fs.ReadDir(files, ".")
	var names []string
	for _, e := range entries {
		if n, ok := strings.CutSuffix(e.Name(), ".yaml"); ok && !e.IsDir() {
			names = append(names, n)
		}
	}
	sort.Strings(names)
	return names
}

// Read returns the script text of the built-in procedure name.
func Read(name string) ([]byte, error) {
	if strings.ContainsAny(name, "/\\") || name == "" {
		return nil, fmt.Errorf("built-in procedure %q: not a procedure name", name)
	}
	data, err := files.ReadFile(name + ".yaml")
	if err != nil {
		return nil, fmt.Errorf("no built-in procedure %q (have %s)", name, strings.Join(Names(), ", "))
	}
	return data, nil
}
