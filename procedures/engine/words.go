package engine

import (
	"fmt"
	"time"
)

// Messages gives the engine's texts in the engineer's language. The key is
// the English text as the engine writes it (a fmt format where it takes
// values), in the manner of gettext; *catalog.Catalog implements it, and a
// nil Messages is English. Nothing measured depends on it: only the words
// said and shown, and the journalled copy of them.
type Messages interface {
	// Text is the translation of the English source (a fmt format or a
	// whole text), or source itself when there is none.
	Text(source string) string
	// Number rewrites a number strconv wrote ("0.455") with the
	// language's decimal separator ("0,455").
	Number(s string) string
}

// t is the engineer's language's form of the English format, filled with
// args as fmt.Sprintf does.
func (e *Engine) t(format string, args ...any) string {
	if m := e.cfg.Messages; m != nil {
		format = m.Text(format)
	}
	if len(args) == 0 {
		return format
	}
	return fmt.Sprintf(format, args...)
}

// text translates a whole text said or shown, as the panel gets it: a
// fixed English text ("Release the beam.") is found in the catalog; one
// already composed in the language (with t) is not, and is left as it is.
func (e *Engine) text(s string) string {
	if m := e.cfg.Messages; m != nil && s != "" {
		return m.Text(s)
	}
	return s
}

// num writes a measured value to three significant figures (fmtNum) with
// the language's decimal separator.
func (e *Engine) num(v float64) string { return e.decimal(fmtNum(v)) }

// decimal puts the language's decimal separator into a number strconv or
// fmt wrote.
func (e *Engine) decimal(s string) string {
	if m := e.cfg.Messages; m != nil {
		return m.Number(s)
	}
	return s
}

// duration says d in minutes and seconds: "45 seconds", "1 minute",
// "4 minutes 30 seconds".
func (e *Engine) duration(d time.Duration) string {
	s := int(d.Round(time.Second) / time.Second)
	m := s / 60
	s %= 60
	switch {
	case m == 0:
		return e.t("%d seconds", s)
	case m == 1 && s == 0:
		return e.t("1 minute")
	case s == 0:
		return e.t("%d minutes", m)
	case m == 1:
		return e.t("1 minute %d seconds", s)
	default:
		return e.t("%d minutes %d seconds", m, s)
	}
}
