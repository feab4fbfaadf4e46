package benchsim

import (
	"context"
	"slices"
	"strings"
	"testing"
	"time"

	"go.bug.st/serial"

	"kermalux/drivers/serialline"
)

// The simulated SCPI meter against IEEE 488.2 and SCPI 1999.0, command by
// command (the references are named in scpimeter.go; values from memory
// of the published texts).
func TestOndrakelFollowsIEEE4882(t *testing.T) {
	b, _ := manualBench(t, "pelverton-pulsed-scpi.yaml", nil)
	d := dialectOf(b, RoleDosimeter)
	for _, tc := range []struct {
		cmd  string
		want []string
	}{
		// Power on: PON (bit 7) set in the event status register
		// (488.2, 11.5.1.1); *ESR? reads and clears it.
		{"*ESR?", []string{"128"}},
		{"*ESR?", []string{"0"}},
		// The mandatory common commands (488.2, 10).
		{"*OPC?", []string{"1"}},
		{"*TST?", []string{"0"}},
		{"*WAI", nil},
		{"*OPC", nil},
		{"*ESR?", []string{"1"}}, // OPC is bit 0
		{"*ESE 36", nil},
		{"*ESE?", []string{"36"}},
		{"*SRE 48", nil},
		{"*SRE?", []string{"48"}},
		{"*STB?", []string{"0"}},
		// A parameter where none is allowed: -108 (SCPI Vol. 2, 21.8.9).
		{"*RST 5", nil},
		{"SYST:ERR?", []string{`-108,"Parameter not allowed"`}},
		// A missing parameter: -109.
		{"UNIT:KRAT", nil},
		{"SYST:ERR:NEXT?", []string{`-109,"Missing parameter"`}},
		{"*ESE", nil},
		{"SYSTem:ERRor:NEXT?", []string{`-109,"Missing parameter"`}},
		{"SYST:ERR:NEXT?", []string{`0,"No error"`}},
		// Several queries in one message: one response message, the
		// replies joined by ';' (488.2, 8.4.1).
		{"*IDN?;*OPC?", []string{"ONDRAKEL,DX-2,DX2-30417,1.08;1"}},
		{"UNIT:KRAT?;:SYST:ERR?", []string{"UGY/S;0,\"No error\""}},
		// After ';' a header is relative to the previous one's path
		// (SCPI Vol. 1, 6.2.4): UNIT:KRAT MR/S;KRAT? asks UNIT:KRAT?.
		{"UNIT:KRAT MR/S;KRAT?", []string{"MR/S"}},
		{"*RST", nil},
		{"*CLS", nil},
		// An error sets its event bit and the queue bit of the status
		// byte: -113 is a command error, ESR bit 5 (488.2, 11.5.1.1).
		{"BOGUS", nil},
		// 4 (queue not empty) + 32 (ESB: CME enabled by *ESE 36) + 64
		// (MSS: ESB is enabled by *SRE 48), 488.2 11.2.2.
		{"*STB?", []string{"100"}},
		{"*ESR?", []string{"32"}},
		{"SYST:ERR?", []string{`-113,"Undefined header"`}},
		{"*STB?", []string{"0"}},
	} {
		if got := d.command(tc.cmd); !slices.Equal(got, tc.want) {
			t.Errorf("%q → %q, want %q", tc.cmd, got, tc.want)
		}
	}
	// Ten errors fill the queue; the eleventh makes the last -350.
	for range 12 {
		d.command("BOGUS")
	}
	var last string
	for range 10 {
		last = d.command("SYST:ERR?")[0]
	}
	if last != `-350,"Queue overflow"` {
		t.Errorf("last of a full queue: %q, want -350", last)
	}
}

// Under range is signalled: SCPI's negative overflow and -222.
func TestOndrakelUnderRange(t *testing.T) {
	b, clk := manualBench(t, "pelverton-pulsed-scpi.yaml", func(s *Scenario) { s.Dosimeter.Range.Min = 1e6 })
	clk.Advance(time.Second)
	d := dialectOf(b, RoleDosimeter)
	if got := d.command("READ?;:SYST:ERR?"); !slices.Equal(got, []string{`-9.9E37;-222,"Data out of range"`}) {
		t.Errorf("under range READ? → %q", got)
	}
}

// rawClient opens a simulated meter's port as a plain serial client that
// reads only when told to.
func rawClient(t *testing.T, link string, baud int) serial.Port {
	t.Helper()
	sp, err := serial.Open(link, &serial.Mode{BaudRate: baud})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { sp.Close() })
	return sp
}

// readReply reads one LF-ended line (up to 2 s of real time).
func readReply(t *testing.T, sp serial.Port) string {
	t.Helper()
	var out []byte
	buf := make([]byte, 256)
	deadline := time.Now().Add(2 * time.Second)
	for time.Now().Before(deadline) {
		_ = sp.SetReadTimeout(100 * time.Millisecond)
		n, err := sp.Read(buf)
		if err != nil {
			t.Fatal(err)
		}
		out = append(out, buf[:n]...)
		if i := strings.IndexByte(string(out), '\n'); i >= 0 {
			return string(out[:i])
		}
	}
	t.Fatalf("no reply line; got %q", out)
	return ""
}

func send(t *testing.T, sp serial.Port, s string) {
	t.Helper()
	if _, err := sp.Write([]byte(s)); err != nil {
		t.Fatal(err)
	}
}

// waitUnread waits until the meter's reply sits unread in the client's
// input queue.
func waitUnread(t *testing.T, p *port) {
	t.Helper()
	for range 400 {
		if p.unread() > 0 {
			return
		}
		time.Sleep(5 * time.Millisecond)
	}
	t.Fatal("the reply never arrived")
}

// Over a real pseudo-terminal: a new query while the last reply is unread
// is -410 Query INTERRUPTED and the old reply is gone (IEEE 488.2,
// 6.3.2.3); a command longer than the input buffer is -363, not silence.
func TestOndrakelOverPty(t *testing.T) {
	r := startRig(t, "pelverton-pulsed-scpi.yaml", 1, nil)
	sp := rawClient(t, r.ports.Dosimeter.Link, 19200)
	send(t, sp, "*CLS\n*IDN?\n")
	waitUnread(t, r.b.ports[0])
	send(t, sp, "*OPC?\n")
	for range 400 { // wait until the meter took the second query
		if q := r.b.ports[0].unread(); q > 0 && q < len("ONDRAKEL") {
			break
		}
		time.Sleep(5 * time.Millisecond)
	}
	if got := readReply(t, sp); got != "1" {
		t.Errorf("after an interrupted query got %q, want only the new reply 1", got)
	}
	send(t, sp, "SYST:ERR?\n")
	if got := readReply(t, sp); got != `-410,"Query INTERRUPTED"` {
		t.Errorf("error queue: %q, want -410", got)
	}
	send(t, sp, "UNIT:KRAT "+strings.Repeat("X", 300)+"\nSYST:ERR?\n")
	if got := readReply(t, sp); got != `-363,"Input buffer overrun"` {
		t.Errorf("after a 310-byte command: %q, want -363", got)
	}
}

// A client at the wrong speed gets noise, never a clean reply: a wrong
// baud rate in a profile shows in a test (issue: 2400 baud read a
// 9600-baud meter cleanly).
func TestWrongBaudGetsNoise(t *testing.T) {
	r := startRig(t, "tollemby-rise-room2.yaml", 1, nil)
	for _, tc := range []struct {
		baud int
		ok   bool
	}{{2400, false}, {9600, true}} {
		p, err := serialline.Open(context.Background(), serialline.Config{Port: r.ports.Dosimeter.Link, Baud: tc.baud, SendEnd: serialline.CR, ReceiveEnd: serialline.CRLF, ReadTimeout: 500 * time.Millisecond}, serialline.Options{Log: quietLog})
		if err != nil {
			t.Fatal(err)
		}
		if err := p.WriteLine(context.Background(), "ID?"); err != nil {
			t.Fatal(err)
		}
		l, err := p.ReadLine(context.Background())
		p.Close()
		clean := err == nil && strings.HasPrefix(l.Text, "VELTRANE KR-40")
		if clean != tc.ok {
			t.Errorf("%d baud to a 9600-baud meter: got %q, %v", tc.baud, l.Text, err)
		}
	}
}
