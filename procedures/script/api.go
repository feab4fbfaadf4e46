package script

import (
	"fmt"

	"kermalux/drivers/filepos"
	"kermalux/drivers/units"
)

// Problem is one thing wrong with a script.
type Problem struct {
	Pos    Pos
	Reason string
}

func (p Problem) String() string { return fmt.Sprintf("%s: %s", p.Pos, p.Reason) }

// FileError gives the problem in the position-error shape every kermalux
// text file shares.
func (p Problem) FileError() *filepos.Error {
	return &filepos.Error{File: p.Pos.File, Line: p.Pos.Line, Column: p.Pos.Col, Msg: p.Reason}
}

// Problems is every problem found in a script; it is an error.
type Problems []Problem

func (ps Problems) Error() string {
	if len(ps) == 0 {
		return "no problems"
	}
	s := ps[0].String()
	if len(ps) > 1 {
		s += fmt.Sprintf(" (and %d more)", len(ps)-1)
	}
	return s
}

// Unwrap gives every problem as a *filepos.Error, so errors.As finds the
// first one's file and line.
func (ps Problems) Unwrap() []error {
	out := make([]error, len(ps))
	for i, p := range ps {
		out[i] = p.FileError()
	}
	return out
}

// Resolver finds an included procedure by the name written in an include
// step, relative to the file of the procedure that includes it.
type Resolver interface {
	Resolve(name, from string) (*Procedure, error)
}

// Env is what the checker knows about the bench a procedure will run on.
// The zero Env checks the script alone.
type Env struct {
	// Quantities the configured meters report, by meter name; nil: not
	// known, the check is skipped.
	Quantities map[string][]units.Quantity
	// FieldModes the intensifier has (from the bench file), for
	// per_field_mode blocks that take their modes from the bench.
	FieldModes []string
	// Resolver finds included procedures; nil: the built-ins and files
	// next to the including one.
	Resolver Resolver
	// Values are the values the bench file gives for enter steps, by
	// value name (canonical units); nil: not known, the checks of
	// bench-sourced values are skipped.
	Values map[string]float64
	// HandsFree: the bench's panel is a foot switch, which cannot enter a
	// number, so every value asked needs a default (with Values known).
	HandsFree bool
	// Texts is the bench's language; nil: English, the source, in which
	// every text is its own. Given, Check refuses a text with no
	// translation, naming the file, line and text.
	Texts Translator
}
