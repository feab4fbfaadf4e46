// Package filepos gives every text file kermalux reads (meter profiles,
// simulator scenarios, certificates, bench files, procedure scripts) one
// shape of error: the file, the 1-based line and column, the key the
// problem is at, and what was wrong or expected. It prints as
// "file:line:col: key: message", the form editors and the Go tools jump to,
// in the manner of the standard library's go/scanner.Error.
package filepos

import (
	"fmt"
	"strings"
)

// Error is a problem at a place in a text file.
type Error struct {
	File   string // path or name of the file, as the user gave it
	Line   int    // 1-based; 0 when unknown
	Column int    // 1-based; 0 when unknown
	Key    string // dotted path of the field ("chamber.reference_pressure"); empty for syntax errors
	Msg    string // what was wrong, and what was expected
	Err    error  // the cause, if any (a unit error, a decoding error)
}

// Error formats the problem as file:line:col: key: message, leaving out
// what is unknown.
func (e *Error) Error() string {
	var b strings.Builder
	b.WriteString(e.File)
	if e.Line > 0 {
		fmt.Fprintf(&b, ":%d", e.Line)
		if e.Column > 0 {
			fmt.Fprintf(&b, ":%d", e.Column)
		}
	}
	b.WriteString(": ")
	if e.Key != "" {
		b.WriteString(e.Key)
		b.WriteString(": ")
	}
	msg := e.Msg
	if msg == "" && e.Err != nil {
		msg = e.Err.Error()
	}
	b.WriteString(msg)
	return b.String()
}

// Unwrap returns the cause.
func (e *Error) Unwrap() error { return e.Err }
