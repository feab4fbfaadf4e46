package serialline_test

import (
	"context"
	"errors"
	"strings"
	"testing"
	"time"

	"kermalux/drivers"
	"kermalux/drivers/clock"
	"kermalux/drivers/serialline"
	"kermalux/drivers/serialline/linetest"
)

func open(t testing.TB, d *linetest.Device, cfg serialline.Config) *serialline.Port {
	t.Helper()
	cfg.Port = d.Link()
	if cfg.ReadTimeout == 0 {
		cfg.ReadTimeout = 300 * time.Millisecond
	}
	cfg.ReopenMin, cfg.ReopenMax = 10*time.Millisecond, 40*time.Millisecond
	p, err := serialline.Open(context.Background(), cfg, serialline.Options{Clock: clock.NewReal()})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { p.Close() })
	return p
}

func TestFraming(t *testing.T) {
	tests := []struct {
		name   string
		end    serialline.Framing
		chunks []string // what the device writes, possibly split mid-line
		want   []string
	}{
		{"crlf", serialline.CRLF, []string{"RD +1.0E+00 uGy/s OK\r\n", "OK\r", "\n"}, []string{"RD +1.0E+00 uGy/s OK", "OK"}},
		{"crlf accepts bare lf", serialline.CRLF, []string{"A\nB\r\n"}, []string{"A", "B"}},
		{"lf", serialline.LF, []string{"L 1", "23,45 cd/m2 S0\nACK\n"}, []string{"L 123,45 cd/m2 S0", "ACK"}},
		{"cr", serialline.CR, []string{"one\rtwo\r"}, []string{"one", "two"}},
		{"cr skips lf after cr", serialline.CR, []string{"one\r\ntwo\r\n"}, []string{"one", "two"}},
		{"blank lines skipped", serialline.LF, []string{"\n\nx\n"}, []string{"x"}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			d := linetest.New(t, "dev", '\n', nil)
			p := open(t, d, serialline.Config{ReceiveEnd: tc.end})
			// Each chunk is taken off the line before the next is sent,
			// so lines really arrive split.
			sent := 0
			for _, c := range tc.chunks {
				d.Send(c)
				sent += len(c)
				waitFor(t, p, "the chunk received", func() bool { return p.Received() >= uint64(sent) })
			}
			for _, w := range tc.want {
				l, err := p.ReadLine(context.Background())
				if err != nil {
					t.Fatalf("want %q: %v", w, err)
				}
				if l.Text != w {
					t.Errorf("got %q, want %q", l.Text, w)
				}
				if l.AfterReconnect {
					t.Errorf("%q marked after reconnect on first open", w)
				}
			}
		})
	}
}

func TestWriteFraming(t *testing.T) {
	for _, tc := range []struct {
		end  serialline.Framing
		want string
	}{{serialline.CR, "ID?\r"}, {serialline.LF, "ID?\n"}, {serialline.CRLF, "ID?\r\n"}} {
		// The device completes a command at the last byte of the
		// expected ending, so it sees "ID?" only if that byte was sent.
		d2 := linetest.New(t, "dev2", tc.want[len(tc.want)-1], nil)
		p2 := open(t, d2, serialline.Config{SendEnd: tc.end})
		if err := p2.WriteLine(context.Background(), "ID?"); err != nil {
			t.Fatal(err)
		}
		ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
		err := d2.WaitCommands(ctx, 1)
		cancel()
		if err != nil {
			t.Errorf("%s: %v", tc.end, err)
		}
		if c := d2.Commands(); len(c) != 1 || c[0] != "ID?" {
			t.Errorf("%s: device got %q, want [ID?]", tc.end, c)
		}
	}
}

func TestTimeout(t *testing.T) {
	d := linetest.New(t, "dev", '\n', nil)
	p := open(t, d, serialline.Config{ReadTimeout: 200 * time.Millisecond})
	_, err := p.ReadLine(context.Background())
	if !errors.Is(err, drivers.ErrTimeout) {
		t.Fatalf("silent device: got %v, want ErrTimeout", err)
	}
	if !strings.Contains(err.Error(), d.Link()) {
		t.Errorf("error %q does not name the port", err)
	}
	// A partial line then silence: a timeout that shows the fragment.
	d.Send("RD +1.2")
	_, err = p.ReadLine(context.Background())
	if !errors.Is(err, drivers.ErrTimeout) || !strings.Contains(err.Error(), `"RD +1.2"`) {
		t.Fatalf("partial line: got %v, want ErrTimeout naming the fragment", err)
	}
	// The fragment is not glued to the next line.
	d.Send("OK\n")
	l, err := p.ReadLine(context.Background())
	if err != nil || l.Text != "OK" {
		t.Fatalf("after partial: got %q, %v; want OK", l.Text, err)
	}
	if !p.Up() {
		t.Error("a timeout must not mark the link down")
	}
}

func TestContextEndsRead(t *testing.T) {
	d := linetest.New(t, "dev", '\n', nil)
	p := open(t, d, serialline.Config{ReadTimeout: 10 * time.Second})
	ctx, cancel := context.WithTimeout(context.Background(), 50*time.Millisecond)
	defer cancel()
	start := time.Now()
	_, err := p.ReadLine(ctx)
	if err == nil || time.Since(start) > 2*time.Second {
		t.Fatalf("got %v after %v; want an error soon after the context's deadline", err, time.Since(start))
	}
}

func TestLongLineIsGarbled(t *testing.T) {
	d := linetest.New(t, "dev", '\n', nil)
	p := open(t, d, serialline.Config{MaxLine: 16})
	d.Send(strings.Repeat("x", 100) + "\nOK\n")
	_, err := p.ReadLine(context.Background())
	if !errors.Is(err, drivers.ErrGarbled) {
		t.Fatalf("got %v, want ErrGarbled", err)
	}
	l, err := p.ReadLine(context.Background())
	if err != nil || l.Text != "OK" {
		t.Fatalf("after long line: got %q, %v; want OK", l.Text, err)
	}
	// Endless garbage without a line end stays bounded and reported.
	d.Send(strings.Repeat("\x00\xff", 200))
	_, err = p.ReadLine(context.Background())
	if !errors.Is(err, drivers.ErrGarbled) {
		t.Fatalf("endless garbage: got %v, want ErrGarbled", err)
	}
}

func TestPulledCable(t *testing.T) {
	d := linetest.New(t, "veltrane-KR40-1187", '\n', nil)
	p := open(t, d, serialline.Config{})
	first := d.Device()
	d.Send("before\n")
	if l, err := p.ReadLine(context.Background()); err != nil || l.Text != "before" {
		t.Fatalf("got %q, %v", l.Text, err)
	}

	d.Pull()
	_, err := p.ReadLine(context.Background())
	if !errors.Is(err, drivers.ErrLinkDown) {
		t.Fatalf("pulled: got %v, want ErrLinkDown", err)
	}
	if !strings.Contains(err.Error(), d.Link()) {
		t.Errorf("error %q does not name the port", err)
	}
	if p.Up() {
		t.Error("link still up after a pull")
	}
	// Still unplugged: every call says so, none hangs or spins.
	for range 3 {
		if err := p.WriteLine(context.Background(), "RD?"); !errors.Is(err, drivers.ErrLinkDown) {
			t.Fatalf("while unplugged: got %v, want ErrLinkDown", err)
		}
	}

	d.Replug()
	if d.Device() == first {
		t.Fatalf("replug reused %s", first)
	}
	d.Send("stale\n") // sent before the client reopened: must not pass as fresh
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	if err := d.WaitQueued(ctx, len("stale\n")); err != nil {
		t.Fatal(err)
	}
	var ok bool
	for range 50 {
		if err := p.Ensure(context.Background()); err == nil {
			ok = true
			break
		}
	}
	if !ok {
		t.Fatal("did not reopen after replug")
	}
	if p.Generation() != 2 || p.Device() != d.Device() {
		t.Errorf("generation %d device %s; want 2 and %s", p.Generation(), p.Device(), d.Device())
	}
	d.Send("fresh\n")
	l, err := p.ReadLine(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if l.Text != "fresh" || !l.AfterReconnect {
		t.Errorf("got %q after reconnect=%v; want \"fresh\" marked", l.Text, l.AfterReconnect)
	}
	d.Send("next\n")
	if l, _ := p.ReadLine(context.Background()); l.AfterReconnect {
		t.Error("second line after reconnect still marked")
	}
}

func TestOpenErrors(t *testing.T) {
	ctx := context.Background()
	for _, tc := range []struct {
		cfg  serialline.Config
		want string
	}{
		{serialline.Config{Port: "/nonexistent/ttyUSB9"}, "/nonexistent/ttyUSB9"},
		{serialline.Config{Port: "/dev/x", Flow: serialline.FlowRTSCTS}, "flow control"},
		{serialline.Config{Port: "/dev/x", Flow: "maybe"}, "expected none, rts-cts or xon-xoff"},
		{serialline.Config{Port: "/dev/x", Parity: "sometimes"}, "parity"},
		{serialline.Config{Port: "/dev/x", DataBits: 9}, "data bits 9"},
		{serialline.Config{Port: "/dev/x", StopBits: 3}, "stop bits 3"},
		{serialline.Config{Port: "/dev/x", ReceiveEnd: "nul"}, "expected cr, lf or crlf"},
		{serialline.Config{}, "no port given"},
	} {
		_, err := serialline.Open(ctx, tc.cfg, serialline.Options{})
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%+v: got %v, want an error containing %q", tc.cfg, err, tc.want)
		}
	}
}

func TestCloseIsFinal(t *testing.T) {
	d := linetest.New(t, "dev", '\n', nil)
	p := open(t, d, serialline.Config{})
	p.Close()
	if err := p.WriteLine(context.Background(), "x"); err == nil || errors.Is(err, drivers.ErrLinkDown) {
		t.Errorf("after Close: got %v, want a closed-port error (not a reconnect)", err)
	}
}

// BenchmarkReadLine reads lines a device has already sent, the hot path of
// two meters at 50 Hz.
func BenchmarkReadLine(b *testing.B) {
	d := linetest.New(b, "dev", '\n', nil)
	p := open(b, d, serialline.Config{})
	line := "L 123,45 cd/m2 S0\n"
	batch := strings.Repeat(line, 100)
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if i%100 == 0 {
			b.StopTimer()
			d.Send(batch)
			b.StartTimer()
		}
		if _, err := p.ReadLine(context.Background()); err != nil {
			b.Fatal(err)
		}
	}
}

// A scaled clock shortens a timeout, but never below what a loaded host
// needs to schedule the reader (250 ms) nor below the duration itself;
// the real clock keeps it, and a manual clock keeps it as given.
func TestRealTimeout(t *testing.T) {
	for _, tc := range []struct {
		name string
		clk  clock.Clock
		d    time.Duration
		want time.Duration
	}{
		{"real clock", clock.NewReal(), time.Second, time.Second},
		{"real clock, short", clock.NewReal(), 100 * time.Millisecond, 100 * time.Millisecond},
		{"2x", clock.NewScaled(2, time.Time{}), time.Second, 500 * time.Millisecond},
		{"20x, cut to the floor", clock.NewScaled(20, time.Time{}), time.Second, 250 * time.Millisecond},
		{"20x, short timeout kept", clock.NewScaled(20, time.Time{}), 100 * time.Millisecond, 100 * time.Millisecond},
		{"manual", clock.NewManual(time.Time{}), 3 * time.Second, 3 * time.Second},
	} {
		if got := serialline.RealTimeout(tc.clk, tc.d); got != tc.want {
			t.Errorf("%s: %v becomes %v, want %v", tc.name, tc.d, got, tc.want)
		}
	}
}
