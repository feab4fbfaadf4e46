package filepos

import (
	"errors"
	"fmt"
	"io/fs"
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
