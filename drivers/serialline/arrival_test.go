package serialline_test

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"testing"
	"time"

	"kermalux/drivers"
	"kermalux/drivers/clock"
	"kermalux/drivers/serialline"
	"kermalux/drivers/serialline/linetest"
)

// waitFor waits until cond (an event the port's reader makes happen)
// holds, looking again at each of the reader's events, for up to 10 s of
// real time; it asserts no timing, only that the event happens.
func waitFor(t *testing.T, p *serialline.Port, what string, cond func() bool) {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	if err := p.WaitFor(ctx, cond); err != nil {
		t.Fatalf("never happened: %s (%v)", what, err)
	}
}

// A line is stamped when it arrives, not when the caller gets round to
// reading it: the clock moves on 5 s between arrival and ReadLine, and the
// line keeps its arrival time.
func TestLinesStampedOnArrival(t *testing.T) {
	clk := clock.NewManual(time.Date(2026, 3, 2, 9, 0, 0, 0, time.UTC))
	d := linetest.New(t, "dev", '\n', nil)
	p, err := serialline.Open(context.Background(), serialline.Config{Port: d.Link(), ReadTimeout: 2 * time.Second}, serialline.Options{Clock: clk})
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	clk.Advance(1 * time.Second)
	d.Send("L 1,00 cd/m2 S0\n")
	waitFor(t, p, "the line queued", func() bool { return p.Buffered() == 1 })
	clk.Advance(5 * time.Second)
	l, err := p.ReadLine(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if l.Mono != time.Second {
		t.Errorf("line stamped at %v, want 1s (when it arrived)", l.Mono)
	}
}

// The queue is bounded: lines nobody reads push out the oldest, and the
// loss is counted.
func TestQueueOverflowCounted(t *testing.T) {
	d := linetest.New(t, "dev", '\n', nil)
	p := open(t, d, serialline.Config{Buffer: 4})
	var b strings.Builder
	for i := range 10 {
		fmt.Fprintf(&b, "line %d\n", i)
	}
	d.Send(b.String())
	waitFor(t, p, "6 lines dropped", func() bool { return p.Overflows() == 6 })
	if n := p.Buffered(); n != 4 {
		t.Errorf("%d lines held, want 4", n)
	}
	for i := 6; i < 10; i++ {
		l, err := p.ReadLine(context.Background())
		if err != nil || l.Text != fmt.Sprintf("line %d", i) {
			t.Fatalf("got %q, %v; want line %d (the newest four)", l.Text, err, i)
		}
	}
}

// A context deadline before the read timeout is not a timeout of the
// meter: the read returns the context's error, after the context ended
// (issue: read --for reported false "no line within 1s" at its deadline).
func TestContextDeadlineIsNotATimeout(t *testing.T) {
	d := linetest.New(t, "dev", '\n', nil)
	p := open(t, d, serialline.Config{ReadTimeout: 10 * time.Second})
	ctx, cancel := context.WithTimeout(context.Background(), 80*time.Millisecond)
	defer cancel()
	_, err := p.ReadLine(ctx)
	if errors.Is(err, drivers.ErrTimeout) {
		t.Fatalf("got %v: a context deadline reported as the meter's timeout", err)
	}
	if !errors.Is(err, context.DeadlineExceeded) || ctx.Err() == nil {
		t.Fatalf("got %v (context error %v); want the context's deadline, after it passed", err, ctx.Err())
	}
}

// A timeout says how long the read really waited, not only the limit.
func TestTimeoutSaysHowLongItWaited(t *testing.T) {
	d := linetest.New(t, "dev", '\n', nil)
	p := open(t, d, serialline.Config{ReadTimeout: 150 * time.Millisecond})
	start := time.Now()
	_, err := p.ReadLine(context.Background())
	waited := time.Since(start)
	if !errors.Is(err, drivers.ErrTimeout) {
		t.Fatalf("got %v, want ErrTimeout", err)
	}
	// The message carries "in <waited> (timeout 150ms)"; parse the waited
	// duration back and check it against the wall clock around the call.
	msg := err.Error()
	i := strings.Index(msg, ") in ")
	j := strings.Index(msg, " (timeout 150ms)")
	if i < 0 || j < i {
		t.Fatalf("message %q does not say how long it waited", msg)
	}
	got, perr := time.ParseDuration(msg[i+5 : j])
	if perr != nil || got < 150*time.Millisecond || got > waited+time.Millisecond {
		t.Errorf("message says it waited %v (%v); the call took %v and the limit was 150ms", got, perr, waited)
	}
}

// A line longer than the limit is reported once, however often the
// caller polls and flushes while its rest goes by (issue: one 1 MB line
// reported about 90 times, once per poll).
func TestLongLineReportedOnceAcrossPolls(t *testing.T) {
	d := linetest.New(t, "dev", '\n', nil)
	p := open(t, d, serialline.Config{MaxLine: 64, ReadTimeout: 100 * time.Millisecond})
	go func() {
		chunk := strings.Repeat("x", 4096)
		for range 64 { // 256 KiB, one line
			d.Send(chunk)
		}
		d.Send("\nOK\n")
	}()
	garbled := 0
	for i := 0; i < 200; i++ {
		l, err := p.ReadLine(context.Background())
		if err == nil && l.Text == "OK" {
			break
		}
		if errors.Is(err, drivers.ErrGarbled) {
			garbled++
		}
		if err == nil {
			t.Fatalf("got the line %q, want only OK after the long line", l.Text)
		}
		p.Flush() // as a polled dialect does after an error
	}
	if garbled != 1 {
		t.Errorf("the long line was reported %d times, want once", garbled)
	}
}
