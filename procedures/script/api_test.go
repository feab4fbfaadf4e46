package script

import (
	"errors"
	"testing"

	"kermalux/drivers/filepos"
)

// TestProblemsArePositionErrors: a caller finds the first problem's file
// and line with errors.As, as with every other kermalux file format.
func TestProblemsArePositionErrors(t *testing.T) {
	var err error = Problems{
		{Pos: Pos{File: "a.yaml", Line: 3, Col: 5}, Reason: "unknown kind"},
		{Pos: Pos{File: "a.yaml", Line: 9, Col: 1}, Reason: "dangling reference"},
	}
	var fe *filepos.Error
	if !errors.As(err, &fe) || fe.Line != 3 || fe.Column != 5 || fe.File != "a.yaml" {
		t.Fatalf("errors.As: %v", fe)
	}
	if got, want := fe.Error(), "a.yaml:3:5: unknown kind"; got != want {
		t.Errorf("%q, want %q", got, want)
	}
	one := Problem{Pos: Pos{File: "a.yaml", Line: 3, Col: 5}, Reason: "x"}
	if got, want := one.String(), "a.yaml:3:5: x"; got != want {
		t.Errorf("String %q, want %q (the same text as the shared error)", got, want)
	}
}
