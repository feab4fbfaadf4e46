package serialline

import (
	"bytes"
	"io"
	"log/slog"
	"testing"
	"time"

	"kermalux/drivers/clock"
)

// FuzzFrame feeds the background reader's framer arbitrary bytes in
// arbitrary chunks: it never panics, never returns a line holding its
// line end or longer than MaxLine, and for input with no over-long line
// returns exactly the non-empty lines a plain split gives (CR LF framing:
// a trailing CR dropped).
func FuzzFrame(f *testing.F) {
	for _, s := range []string{"RD +1.0E+00 uGy/s OK\r\n", "L 1", "\n\n\r\nx\n", "A\nB\r\nC", "\xff\x00\n"} {
		f.Add([]byte(s), uint8(3))
	}
	f.Fuzz(func(t *testing.T, data []byte, cut uint8) {
		cfg := Config{Port: "fuzz", ReceiveEnd: CRLF, MaxLine: 32, Buffer: 4096}
		cfg.defaults()
		p := &Port{cfg: cfg, term: '\n', clk: clock.NewReal(), log: slog.New(slog.NewTextHandler(io.Discard, nil)), notify: make(chan struct{}, 1)}
		step := int(cut%16) + 1
		p.mu.Lock()
		for i := 0; i < len(data); i += step {
			p.frame(data[i:min(len(data), i+step)], 0, time.Time{})
		}
		var got []string
		long := false
		for _, e := range p.queue {
			if e.err != nil {
				long = true
				continue
			}
			if bytes.IndexByte([]byte(e.line.Text), '\n') >= 0 || len(e.line.Text) > cfg.MaxLine {
				t.Fatalf("line %q: holds its end or is too long", e.line.Text)
			}
			got = append(got, e.line.Text)
		}
		p.mu.Unlock()
		if long {
			return
		}
		var want []string
		parts := bytes.Split(data, []byte{'\n'})
		for _, l := range parts[:len(parts)-1] { // the last has no end yet
			l = bytes.TrimSuffix(l, []byte{'\r'})
			if len(l) > 0 {
				want = append(want, string(l))
			}
		}
		if len(got) != len(want) {
			t.Fatalf("got %q, want %q", got, want)
		}
		for i := range got {
			if got[i] != want[i] {
				t.Fatalf("line %d: got %q, want %q", i, got[i], want[i])
			}
		}
	})
}
