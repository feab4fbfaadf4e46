package filepos

import (
	"bytes"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"testing"
)

func TestErrorText(t *testing.T) {
	cause := fs.ErrNotExist
	for _, c := range []struct {
		name string
		err  *Error
		want string
	}{
		{"all parts", &Error{File: "b.yaml", Line: 12, Column: 3, Key: "limits.kerma_ceiling", Msg: "want a number"}, "b.yaml:12:3: limits.kerma_ceiling: want a number"},
		{"no column", &Error{File: "c.yaml", Line: 4, Key: "serial", Msg: "empty"}, "c.yaml:4: serial: empty"},
		{"no line", &Error{File: "c.yaml", Msg: "file is empty"}, "c.yaml: file is empty"},
		{"column without line is dropped", &Error{File: "c.yaml", Column: 9, Msg: "x"}, "c.yaml: x"},
		{"message from cause", &Error{File: "p.yaml", Line: 2, Err: cause}, "p.yaml:2: " + cause.Error()},
	} {
		if got := c.err.Error(); got != c.want {
			t.Errorf("%s: %q, want %q", c.name, got, c.want)
		}
	}
}

// A caller reads the position with errors.As, through any wrapping.
func TestUnwrapAndAs(t *testing.T) {
	fe := &Error{File: "s.yaml", Line: 7, Msg: "bad", Err: fs.ErrPermission}
	wrapped := fmt.Errorf("loading bench: %w", fe)
	if !errors.Is(wrapped, fs.ErrPermission) {
		t.Error("the cause is lost through Unwrap")
	}
	var got *Error
	if !errors.As(wrapped, &got) || got.Line != 7 {
		t.Errorf("errors.As: %v", got)
	}
	if errors.As(errors.New("plain"), &got) {
		t.Error("errors.As found a position in a plain error")
	}
}

// ReadFile returns a file up to its bound whole, and refuses one a byte
// over it, naming the file and the bound, without reading it all.
func TestReadFileBound(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "results.json")
	if err := os.WriteFile(p, bytes.Repeat([]byte{' '}, 4<<10), 0o600); err != nil {
		t.Fatal(err)
	}
	if b, err := ReadFile(p, 4<<10, "results file"); err != nil || len(b) != 4<<10 {
		t.Fatalf("a file at the bound: %d bytes, %v", len(b), err)
	}
	f, _ := os.OpenFile(p, os.O_APPEND|os.O_WRONLY, 0)
	f.Write([]byte{' '})
	f.Close()
	_, err := ReadFile(p, 4<<10, "results file")
	var fe *Error
	if !errors.As(err, &fe) || err.Error() != p+": larger than 4 KiB: not a results file" {
		t.Errorf("a byte over the bound: %v", err)
	}
	if _, err := ReadFile(filepath.Join(dir, "none"), 1, "x"); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("missing file: %v", err)
	}
}
