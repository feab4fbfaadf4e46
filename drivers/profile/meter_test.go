package profile_test

import (
	"context"
	"errors"
	"math"
	"strings"
	"testing"
	"time"

	"kermalux/drivers"
	"kermalux/drivers/profile"
	"kermalux/drivers/serialline"
	"kermalux/drivers/serialline/linetest"
	"kermalux/drivers/units"
)

func openMeter(t *testing.T, p *profile.Profile, port, name string) *profile.Meter {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	m, err := profile.Open(ctx, p, port, profile.Options{Name: name, Clock: testClock(), Log: quiet()})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { m.Close() })
	return m
}

func ctx(t *testing.T) context.Context {
	c, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	t.Cleanup(cancel)
	return c
}

// taken waits until the port's reader has taken every byte sent off the
// pty (the kernel gives no event for it: looked at every millisecond).
func taken(t *testing.T, d *linetest.Device) {
	t.Helper()
	c := ctx(t)
	for q, err := d.Queued(); err != nil || q > 0; q, err = d.Queued() {
		if err != nil || c.Err() != nil {
			t.Fatalf("bytes sent not taken by the port: %v %v", err, c.Err())
		}
		time.Sleep(time.Millisecond)
	}
}

func TestPolledIdentifyAndSetup(t *testing.T) {
	_, d := newKR40(t)
	m := openMeter(t, load(t, "veltrane-kr40.yaml"), d.Link(), "dosimeter")
	// Identified first (kept, to compare after a reconnection), then set up.
	if got, want := strings.Join(d.Commands(), ","), "ID?,REMOTE,UNIT UGY/S"; got != want {
		t.Errorf("set-up sent %q, want %q", got, want)
	}
	id, err := m.Identify(ctx(t))
	if err != nil {
		t.Fatal(err)
	}
	// meters.md: `ID?` → `VELTRANE KR-40 SN=KR40-1187 FW=2.3`
	want := drivers.Identity{Maker: "VELTRANE", Model: "KR-40", Serial: "KR40-1187", Firmware: "2.3", Raw: "VELTRANE KR-40 SN=KR40-1187 FW=2.3"}
	if id != want {
		t.Errorf("identity %+v, want %+v", id, want)
	}
}

// The conversions expected below are computed from the published
// constants, not from package units: 1 R = 2.58e-4 C/kg (NIST SP 811,
// Appendix B.9) and W/e = 33.97 J/C (ICRU Report 90), so 1 mR of exposure
// is 2.58e-7 C/kg × 33.97 J/C = 8.76426e-6 Gy = 8.76426 µGy of air kerma.
const uGyPerMR = 2.58e-7 * 33.97 * 1e6

func TestPolledReadings(t *testing.T) {
	tests := []struct {
		name      string
		unit      string
		value     float64
		state     string
		reply     string // verbatim reply instead of the formatted one
		want      float64
		wantSt    drivers.Status
		wantErr   error
		wantInErr string
	}{
		{name: "ok", unit: "uGy/s", value: 0.1234, state: "OK", want: 0.1234, wantSt: drivers.StatusOK},
		{name: "mR/s", unit: "mR/s", value: 0.01, state: "OK", want: 0.01 * uGyPerMR, wantSt: drivers.StatusOK},
		{name: "mR/min", unit: "mR/min", value: 0.6, state: "OK", want: 0.6 / 60 * uGyPerMR, wantSt: drivers.StatusOK},
		// meters.md: OVR prints the range limit (500 µGy/s).
		{name: "over range", unit: "uGy/s", value: 500, state: "OVR", want: 500, wantSt: drivers.StatusOverRange},
		{name: "under range", unit: "uGy/s", value: 0.005, state: "UND", want: 0.005, wantSt: drivers.StatusUnderRange},
		{name: "fault", unit: "uGy/s", value: 0, state: "ERR", want: 0, wantSt: drivers.StatusFault},
		{name: "unknown unit", unit: "uSv/h", value: 1, state: "OK", wantErr: drivers.ErrUnit, wantInErr: `"uSv/h"`},
		{name: "luminance unit on a dosimeter", unit: "cd/m2", value: 1, state: "OK", wantErr: drivers.ErrUnit},
		{name: "unknown status", unit: "uGy/s", value: 1, state: "HOT", wantErr: drivers.ErrGarbled, wantInErr: `"HOT"`},
		{name: "garbage bytes", reply: "\x13\xfe\x00RD +1.0E@0\r\n", wantErr: drivers.ErrGarbled},
		{name: "error reply", reply: "ERR 10\r\n", wantErr: drivers.ErrGarbled, wantInErr: `"ERR 10"`},
		{name: "unsigned number", reply: "RD 1.2340E-01 uGy/s OK\r\n", wantErr: drivers.ErrGarbled, wantInErr: "sign"},
		{name: "NaN", reply: "RD +NaN uGy/s OK\r\n", wantErr: drivers.ErrGarbled},
		{name: "partial line", reply: "RD +1.23", wantErr: drivers.ErrTimeout, wantInErr: `"RD +1.23"`},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			k, d := newKR40(t)
			m := openMeter(t, load(t, "veltrane-kr40.yaml"), d.Link(), "dosimeter")
			k.set(func(k *kr40) { k.unit, k.value, k.state, k.reply = tc.unit, tc.value, tc.state, tc.reply })
			r, err := m.Read(ctx(t))
			if tc.wantErr != nil {
				if !errors.Is(err, tc.wantErr) {
					t.Fatalf("got %+v, %v; want %v", r, err, tc.wantErr)
				}
				if !strings.Contains(err.Error(), d.Link()) || !strings.Contains(err.Error(), tc.wantInErr) {
					t.Errorf("error %q should name the port and %s", err, tc.wantInErr)
				}
				if r.Usable() {
					t.Errorf("a failed read returned a usable reading %+v", r)
				}
				// The meter recovers on the next good reply.
				k.set(func(k *kr40) { k.unit, k.value, k.state, k.reply = "uGy/s", 0.2, "OK", "" })
				if r, err := m.Read(ctx(t)); err != nil || r.Value != 0.2 {
					t.Fatalf("after the bad reply: %+v, %v; want 0.2 µGy/s", r, err)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if math.Abs(r.Value-tc.want) > 1e-9*math.Max(1, tc.want) || r.Status != tc.wantSt {
				t.Errorf("got %v %s %s, want %v µGy/s %s", r.Value, r.Unit, r.Status, tc.want, tc.wantSt)
			}
			if r.Unit != "µGy/s" || r.Quantity != units.AirKermaRate || r.Meter != "dosimeter" || r.RawUnit != tc.unit || r.RawValue != tc.value {
				t.Errorf("reading fields %+v", r)
			}
			if !strings.HasPrefix(r.Raw, "RD ") || r.Wall.IsZero() || r.AfterReconnect {
				t.Errorf("raw %q wall %v reconnect %v", r.Raw, r.Wall, r.AfterReconnect)
			}
		})
	}
}

func TestPolledStalledMeter(t *testing.T) {
	k, d := newKR40(t)
	m := openMeter(t, load(t, "veltrane-kr40.yaml"), d.Link(), "dosimeter")
	k.set(func(k *kr40) { k.mute = true })
	_, err := m.Read(ctx(t))
	if !errors.Is(err, drivers.ErrTimeout) || !strings.Contains(err.Error(), `"RD?"`) {
		t.Fatalf("stalled: got %v, want ErrTimeout after RD?", err)
	}
	// A late answer to the timed-out query must not be taken as the next reading.
	k.set(func(k *kr40) { k.mute = false; k.value = 7 })
	d.Send("RD +1.0000E+00 uGy/s OK\r\n")
	taken(t, d)
	r, err := m.Read(ctx(t))
	if err != nil || r.Value != 7 {
		t.Fatalf("after stall: got %+v, %v; want the fresh 7 µGy/s", r, err)
	}
}

func TestPolledPulledCable(t *testing.T) {
	k, d := newKR40(t)
	m := openMeter(t, load(t, "veltrane-kr40.yaml"), d.Link(), "dosimeter")
	if _, err := m.Read(ctx(t)); err != nil {
		t.Fatal(err)
	}
	d.Pull()
	_, err := m.Read(ctx(t))
	if !errors.Is(err, drivers.ErrLinkDown) || !strings.Contains(err.Error(), d.Link()) {
		t.Fatalf("pulled: got %v, want ErrLinkDown naming the port", err)
	}
	if _, err := m.Read(ctx(t)); !errors.Is(err, drivers.ErrLinkDown) {
		t.Fatalf("still pulled: got %v, want ErrLinkDown", err)
	}
	// The meter forgot its set-up, and its first reply is garbled.
	k.set(func(k *kr40) { k.unit = "mR/s"; k.reply = "RD \x00\r\n" })
	d.Replug()
	var r drivers.Reading
	for i := 0; ; i++ {
		r, err = m.Read(ctx(t))
		if errors.Is(err, drivers.ErrGarbled) {
			break
		}
		if !errors.Is(err, drivers.ErrLinkDown) || i > 100 {
			t.Fatalf("reconnecting: %v", err)
		}
	}
	k.set(func(k *kr40) { k.reply = "" })
	if r, err = m.Read(ctx(t)); err != nil {
		t.Fatal(err)
	}
	if !r.AfterReconnect || r.RawUnit != "uGy/s" {
		t.Errorf("first reading after replug %+v: want AfterReconnect (kept past the garbled reply) and the set-up unit uGy/s re-sent", r)
	}
	if r, err := m.Read(ctx(t)); err != nil || r.AfterReconnect {
		t.Errorf("second reading %+v, %v: want unmarked", r, err)
	}
}

func TestStreaming(t *testing.T) {
	f, d := newLM9(t)
	m := openMeter(t, load(t, "vessoric-lm9.yaml"), d.Link(), "photometer")
	if c := d.Commands(); len(c) != 2 || c[0] != "IDN" || c[1] != "STREAM 10" {
		t.Fatalf("start sent %q, want [IDN STREAM 10]", c)
	}
	id, err := m.Identify(ctx(t))
	if err != nil {
		t.Fatal(err)
	}
	if id.Maker != "VESSORIC" || id.Model != "LM-9" || id.Serial != "LM9-5521" {
		t.Errorf("identity %+v (meters.md: VESSORIC LM-9 #LM9-5521)", id)
	}
	for _, tc := range []struct {
		line string
		want float64 // cd/m²
		st   drivers.Status
	}{
		{"L 123,45 cd/m2 S0", 123.45, drivers.StatusOK},
		// 1 fL = (1/π) cd/ft² = 3.426 259 cd/m² (NIST SP 811, Appendix B.9).
		{"L 10,00 fL S0", 34.26259, drivers.StatusOK},
		{"L 9999,00 cd/m2 S1", 9999, drivers.StatusOverRange},
		{"L 0,01 cd/m2 S2", 0.01, drivers.StatusUnderRange},
		{"L 0,00 cd/m2 S9", 0, drivers.StatusFault},
	} {
		f.set(func(f *lm9) { f.line = tc.line })
		var r drivers.Reading
		for range 20 { // skip lines streamed before the change
			if r, err = m.Read(ctx(t)); err != nil {
				t.Fatal(err)
			}
			if r.Raw == tc.line {
				break
			}
		}
		if r.Raw != tc.line || math.Abs(r.Value-tc.want) > 1e-5*tc.want || r.Status != tc.st || r.Unit != "cd/m²" {
			t.Errorf("%q: got %v %s %s from %q; want %v cd/m² %s", tc.line, r.Value, r.Unit, r.Status, r.Raw, tc.want, tc.st)
		}
	}
}

func TestStreamingFaults(t *testing.T) {
	for _, tc := range []struct {
		line string
		want error
	}{
		{"L 12.5 cd/m2 S0", drivers.ErrGarbled}, // decimal point where a comma is printed
		{"L 1,2E+01 cd/m2 S0", drivers.ErrGarbled},
		{"L 12,5 lux S0", drivers.ErrUnit},
		{"L 12,5 uSv/h S0", drivers.ErrUnit},
		{"\x7f\x00L 12,5", drivers.ErrGarbled},
	} {
		f, d := newLM9(t)
		m := openMeter(t, load(t, "vessoric-lm9.yaml"), d.Link(), "photometer")
		f.set(func(f *lm9) { f.line = tc.line })
		var err error
		for range 20 {
			if _, err = m.Read(ctx(t)); err != nil {
				break
			}
		}
		if !errors.Is(err, tc.want) || !strings.Contains(err.Error(), d.Link()) {
			t.Errorf("%q: got %v, want %v naming the port", tc.line, err, tc.want)
		}
	}
}

func TestStreamingWatchdogAndPull(t *testing.T) {
	f, d := newLM9(t)
	m := openMeter(t, load(t, "vessoric-lm9.yaml"), d.Link(), "photometer")
	if _, err := m.Read(ctx(t)); err != nil {
		t.Fatal(err)
	}
	// Stalled: the link stays up but nothing comes for 5 periods.
	f.set(func(f *lm9) { f.silent = true })
	var err error
	for range 20 {
		if _, err = m.Read(ctx(t)); err != nil {
			break
		}
	}
	if !errors.Is(err, drivers.ErrTimeout) || !strings.Contains(err.Error(), "silent") {
		t.Fatalf("stalled: got %v, want the watchdog's ErrTimeout", err)
	}
	f.set(func(f *lm9) { f.silent = false })
	if _, err := m.Read(ctx(t)); err != nil {
		t.Fatalf("after the stall: %v", err)
	}
	var starts int
	f.set(func(f *lm9) { starts = f.started })
	if starts < 2 {
		t.Errorf("the stream was not restarted after the watchdog tripped (%d starts)", starts)
	}

	// Pulled cable: the meter forgets it was streaming.
	d.Pull()
	f.set(func(f *lm9) { f.rate = 0 })
	for range 20 {
		if _, err = m.Read(ctx(t)); err != nil {
			break
		}
	}
	if !errors.Is(err, drivers.ErrLinkDown) {
		t.Fatalf("pulled: got %v, want ErrLinkDown", err)
	}
	d.Replug()
	var r drivers.Reading
	for i := 0; ; i++ {
		if r, err = m.Read(ctx(t)); err == nil {
			break
		}
		if !errors.Is(err, drivers.ErrLinkDown) || i > 100 {
			t.Fatalf("reconnecting: %v", err)
		}
	}
	if !r.AfterReconnect || r.Value != 123.45 {
		t.Errorf("first reading after replug: %+v, want 123.45 cd/m² marked AfterReconnect", r)
	}
}

func TestOpenReportsSetupFailure(t *testing.T) {
	_, d := newKR40(t)
	p := load(t, "veltrane-kr40.yaml")
	p.Setup = append(p.Setup, profile.Exchange{Send: "UNIT GY/H", Expect: "OK"})
	_, err := profile.Open(ctx(t), p, d.Link(), profile.Options{Name: "dosimeter", Clock: testClock(), Log: quiet()})
	if !errors.Is(err, drivers.ErrGarbled) || !strings.Contains(err.Error(), `expected "OK", got "ERR 10"`) || !strings.Contains(err.Error(), d.Link()) {
		t.Fatalf("got %v, want the port, the command and the unexpected reply", err)
	}
	_, err = profile.Open(ctx(t), p, "/nonexistent/by-id/meter", profile.Options{Name: "dosimeter", Log: quiet()})
	if !errors.Is(err, serialline.ErrNoDevice) || errors.Is(err, drivers.ErrLinkDown) || !strings.Contains(err.Error(), "/nonexistent/by-id/meter") {
		t.Fatalf("missing port: got %v, want no such device (not a lost link: it never was up)", err)
	}
}

// After a reconnection a profile meter identifies again: another serial
// on the link is ErrMeterChanged naming both (issue 8, observation 5).
func TestReconnectToAnotherMeterProfile(t *testing.T) {
	k, d := newKR40(t)
	m := openMeter(t, load(t, "veltrane-kr40.yaml"), d.Link(), "dosimeter")
	if _, err := m.Read(ctx(t)); err != nil {
		t.Fatal(err)
	}
	d.Pull()
	if _, err := m.Read(ctx(t)); !errors.Is(err, drivers.ErrLinkDown) {
		t.Fatalf("pulled: got %v", err)
	}
	k.set(func(k *kr40) { k.serial = "KR40-2290" })
	d.Replug()
	var err error
	for i := 0; ; i++ {
		_, err = m.Read(ctx(t))
		if !errors.Is(err, drivers.ErrLinkDown) || i > 100 {
			break
		}
	}
	if !errors.Is(err, drivers.ErrMeterChanged) || !strings.Contains(err.Error(), "KR40-1187") || !strings.Contains(err.Error(), "KR40-2290") {
		t.Fatalf("got %v; want ErrMeterChanged naming both serials", err)
	}
	if _, err := m.Read(ctx(t)); !errors.Is(err, drivers.ErrMeterChanged) {
		t.Errorf("second read: %v; the other meter must give no readings", err)
	}
}

// A meter that streams unprompted (no reading.start) is read as it comes.
func TestStreamingUnprompted(t *testing.T) {
	f, d := newLM9(t)
	f.set(func(m *lm9) { m.rate = 10 })
	p := load(t, "vessoric-lm9.yaml")
	p.Start = profile.Exchange{}
	m := openMeter(t, p, d.Link(), "photometer")
	r, err := m.Read(ctx(t))
	if err != nil || r.Value != 123.45 {
		t.Fatalf("%+v, %v", r, err)
	}
	for _, c := range d.Commands() {
		if strings.HasPrefix(c, "STREAM") || c == "" {
			t.Errorf("sent %q to a meter that streams by itself", c)
		}
	}
}

// An identify answered too late for its timeout (a loaded host) must not
// pass as the reply to the next set-up command: the late identity line
// arrives just before REMOTE's OK and is skipped (on a loaded demo at 20×
// opening failed with `after "REMOTE", expected "OK", got "VELTRANE
// KR-40 ..."`).
func TestLateIdentifyReplyIsNotTheNextReply(t *testing.T) {
	k := &kr40{unit: "uGy/s", value: 0.1234, state: "OK"}
	d := linetest.New(t, "veltrane-KR40-1187", '\r', func(d *linetest.Device, cmd string) {
		switch cmd {
		case "ID?": // no answer in time
		case "REMOTE":
			d.Send("VELTRANE KR-40 SN=KR40-1187 FW=2.3\r\n") // the late identity
			d.Send("OK\r\n")
		default:
			k.handle(d, cmd)
		}
	})
	m := openMeter(t, load(t, "veltrane-kr40.yaml"), d.Link(), "dosimeter")
	r, err := m.Read(ctx(t))
	if err != nil || r.Value != 0.1234 {
		t.Fatalf("after a late identify: %v, %v; want the reading 0.1234", r.Value, err)
	}
}

// A streaming meter's backlog (lines that came while nobody read, the
// engineer still at the board's first prompt) is not the answer to an
// identify: the lines that arrived before the command are dropped first.
// Before, identify skipped at most 100 readings and took the 101st as a
// garbled reply, so a photometer waited for more than ten seconds lost its
// certificate.
func TestIdentifyAfterABacklog(t *testing.T) {
	f, d := newLM9(t)
	m := openMeter(t, load(t, "vessoric-lm9.yaml"), d.Link(), "photometer")
	f.set(func(f *lm9) { f.rate = 0 })
	d.Send(strings.Repeat("L 123,45 cd/m2 S0\n", 200))
	taken(t, d)
	id, err := m.Identify(ctx(t))
	if err != nil {
		t.Fatalf("identify after 200 queued readings: %v", err)
	}
	if id.Serial != "LM9-5521" {
		t.Errorf("identity %+v", id)
	}
}
