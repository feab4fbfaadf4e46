// Package filepos gives every text file kermalux reads (meter profiles,
// simulator scenarios, certificates, bench files, procedure scripts) one
// shape of error: the file, the 1-based line and column, the key the
// problem is at, and what was wrong or expected. It prints as
// "file:line:col: key: message", the form editors and the Go tools jump to,
// in the manner of the standard library's go/scanner.Error.
package filepos

import (
	"fmt"
	"io"
	"os"
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

// ReadFile reads the file at path, at most limit bytes: a file larger than
// that is refused (a *Error naming the file and the bound) before it is
// read whole, so that a huge or endless file cannot take the memory a
// decoder would need for it (a 50 MB YAML string cost 1.5 GB). what names
// the kind of file in the refusal ("results file").
func ReadFile(path string, limit int, what string) ([]byte, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	data, err := io.ReadAll(io.LimitReader(f, int64(limit)+1))
	if err != nil {
		return nil, fmt.Errorf("read %s: %w", path, err)
	}
	if len(data) > limit {
		return nil, &Error{File: path, Msg: fmt.Sprintf("larger than %s: not a %s", sizeText(limit), what)}
	}
	return data, nil
}

func sizeText(n int) string {
	switch {
	case n >= 1<<20 && n%(1<<20) == 0:
		return fmt.Sprintf("%d MiB", n>>20)
	case n >= 1<<10 && n%(1<<10) == 0:
		return fmt.Sprintf("%d KiB", n>>10)
	}
	return fmt.Sprintf("%d bytes", n)
}
