package serialline_test

import (
	"context"
	"testing"

	"kermalux/drivers/serialline"
	"kermalux/drivers/serialline/linetest"
)

// A backlog of old lines, and the line cut in half by the discard, never
// reach the caller: the first line read after Discard is one sent after it.
func TestDiscardDropsBacklogAndCutLine(t *testing.T) {
	d := linetest.New(t, "dev", '\n', nil)
	p := open(t, d, serialline.Config{ReceiveEnd: serialline.LF})
	d.Send("L 1,00 cd/m2 S0\n")
	if l, err := p.ReadLine(context.Background()); err != nil || l.Text != "L 1,00 cd/m2 S0" {
		t.Fatalf("first line: %q, %v", l.Text, err)
	}
	// A backlog: lines sent while nobody read, the last one still in progress.
	d.Send("L 2,00 cd/m2 S0\nL 3,00 cd/m2 S0\nL 4,0")
	waitFor(t, p, "the backlog received", func() bool { return p.Buffered() == 2 })
	p.Discard()
	d.Send("0 cd/m2 S0\nL 5,00 cd/m2 S0\n")
	l, err := p.ReadLine(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if l.Text != "L 5,00 cd/m2 S0" {
		t.Errorf("after Discard got %q, want the first line sent after it", l.Text)
	}
}
