package script

import (
	"os"
	"strings"
	"testing"
	"time"
)

// TestFormatExample: the complete example in FORMAT.md is valid and
// flattens as the text after it says (15 steps, 30 s of beam).
func TestFormatExample(t *testing.T) {
	doc, err := os.ReadFile("FORMAT.md")
	if err != nil {
		t.Fatal(err)
	}
	_, rest, ok := strings.Cut(string(doc), "```yaml\n")
	if !ok {
		t.Fatal("no yaml example in FORMAT.md")
	}
	example, _, ok := strings.Cut(rest, "```")
	if !ok {
		t.Fatal("unterminated yaml example in FORMAT.md")
	}
	p, err := Parse("FORMAT.md example", []byte(example))
	if err != nil {
		t.Fatalf("%v\n%s", err, list(err.(Problems)))
	}
	if ps := Check(p, Env{}); len(ps) > 0 {
		t.Fatalf("%s", list(ps))
	}
	f, err := Flatten(p, Env{})
	if err != nil {
		t.Fatal(err)
	}
	var beam time.Duration
	for _, s := range f.Steps {
		beam += s.MaxBeam()
	}
	if len(f.Steps) != 15 || beam != 30*time.Second+2*ReleaseTime || f.Steps[7].ID != "light@32 cm" {
		t.Errorf("%d steps, %v of beam, step 8 %q", len(f.Steps), beam, f.Steps[7].ID)
	}
}
