package script

import (
	"fmt"
	"os"
	"reflect"
	"regexp"
	"strings"
	"testing"
)

// TestKindsAsDocumented: the table of step kinds the parser reads by has
// the kinds FORMAT.md describes, in its order, each with the keys and the
// required keys its row lists (FORMAT.md is what script authors write by).
func TestKindsAsDocumented(t *testing.T) {
	doc, err := os.ReadFile("FORMAT.md")
	if err != nil {
		t.Fatal(err)
	}
	_, rest, ok := strings.Cut(string(doc), "| kind | keys | required keys | what happens |\n|---|---|---|---|\n")
	if !ok {
		t.Fatal("FORMAT.md has no table of kinds")
	}
	rows, _, _ := strings.Cut(rest, "\n\n")
	code := regexp.MustCompile("`([a-z_]+)`")
	var documented []string
	for _, row := range strings.Split(rows, "\n") {
		cells := strings.Split(row, "|")
		if len(cells) < 5 {
			t.Fatalf("FORMAT.md: not a row of the kinds table: %q", row)
		}
		kind := strings.Trim(strings.TrimSpace(cells[1]), "`")
		keys := func(cell string) string {
			var ks []string
			for _, m := range code.FindAllStringSubmatch(cell, -1) {
				ks = append(ks, m[1])
			}
			return strings.Join(ks, ", ")
		}
		documented = append(documented, kind+": "+keys(cells[2])+"; needs "+keys(cells[3]))
	}
	var table []string
	for _, k := range kindTable {
		table = append(table, string(k.kind)+": "+strings.Join(k.fields, ", ")+"; needs "+strings.Join(k.need, ", "))
	}
	if got, want := strings.Join(table, "\n"), strings.Join(documented, "\n"); got != want {
		t.Errorf("kinds and their keys in the table:\n%s\nin FORMAT.md:\n%s", got, want)
	}
}

// TestKindFieldsGolden: for every kind of the table, a step with only an
// id, its kind and a key no kind has is refused at that key's line and
// column, naming the kind and the keys it takes, and each key the kind
// needs is missed (testdata/kinds.golden; the keys are FORMAT.md's, as
// TestKindsAsDocumented holds them).
func TestKindFieldsGolden(t *testing.T) {
	var b strings.Builder
	for _, k := range kindTable {
		src := head + fmt.Sprintf("  - id: a\n    kind: %s\n    colour: red\n", k.kind)
		_, err := Parse("kinds.yaml", []byte(src))
		ps := asProblems(err)
		want := fmt.Sprintf("kinds.yaml:9:5: unknown field \"colour\" for a %s step (expected ", k.kind)
		var refused bool
		fmt.Fprintf(&b, "%s:\n", k.kind)
		for _, p := range ps {
			refused = refused || strings.HasPrefix(p.String(), want)
			fmt.Fprintf(&b, "\t%s\n", p)
		}
		if !refused {
			t.Errorf("%s: want a problem starting %q; got\n%s", k.kind, want, list(ps))
		}
	}
	golden(t, "testdata/kinds.golden", b.String())
}

// TestEveryKind: a procedure with a step of every kind of the table
// (testdata/procedures/good/every-kind.yaml) parses and checks clean; it
// flattens into steps of every kind that does not expand (and none of
// those that do), and flattening leaves the written steps as they were
// (each kind copies its own part for its place in the run).
func TestEveryKind(t *testing.T) {
	p := loadGood(t, "every-kind.yaml")
	written := map[StepKind]bool{}
	var walk func([]Step)
	walk = func(ss []Step) {
		for i := range ss {
			written[ss[i].Kind] = true
			if ss[i].Include != nil {
				ss[i].Include.Resolved = nil // set by Check; Flatten sets it again
			}
			if ss[i].Repeat != nil {
				walk(ss[i].Repeat.Steps)
			}
		}
	}
	walk(p.Steps)
	fresh, err := Load(goodDir + "/every-kind.yaml")
	if err != nil {
		t.Fatal(err)
	}
	f, err := Flatten(p, Env{})
	if err != nil {
		t.Fatal(err)
	}
	walk(p.Steps)
	if !reflect.DeepEqual(p.Steps, fresh.Steps) {
		t.Error("Flatten changed the written steps")
	}
	flat := map[StepKind]int{}
	for _, s := range f.Steps {
		flat[s.Step.Kind]++
	}
	for _, k := range kindTable {
		if !written[k.kind] {
			t.Errorf("every-kind.yaml has no %s step", k.kind)
		}
		if expands := k.expand != nil; expands != (flat[k.kind] == 0) {
			t.Errorf("%s: %d flat steps, and it expands: %v", k.kind, flat[k.kind], expands)
		}
	}
}

// golden compares got with the file, or rewrites it with -update.
func golden(t *testing.T, file, got string) {
	t.Helper()
	if *update {
		if err := os.MkdirAll("testdata", 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(file, []byte(got), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(file)
	if err != nil {
		t.Fatalf("%v (run go test -update)", err)
	}
	if got != string(want) {
		t.Errorf("%s differs (go test -update rewrites it):\ngot\n%s\nwant\n%s", file, got, want)
	}
}
