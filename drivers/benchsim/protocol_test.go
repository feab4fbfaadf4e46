package benchsim

import (
	"regexp"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"kermalux/drivers/clock"
)

// manualBench is a bench on a manual clock, for line-level checks
// without pseudo-terminals.
func manualBench(t testing.TB, file string, edit func(*Scenario)) (*Bench, *clock.Manual) {
	t.Helper()
	s, err := LoadScenario(scenarioDir + "/" + file)
	if err != nil {
		t.Fatal(err)
	}
	if edit != nil {
		edit(s)
	}
	clk := clock.NewManual(time.Unix(0, 0))
	b, err := New(s, clk)
	if err != nil {
		t.Fatal(err)
	}
	return b, clk
}

func dialectOf(b *Bench, role string) dialect {
	if role == RoleDosimeter {
		return newDialect(b, role, b.scn.Dosimeter)
	}
	return newDialect(b, role, b.scn.Photometer)
}

// The reply formats of meters.md, as regular expressions.
var (
	kr40Reading = regexp.MustCompile(`^RD [+-]\d\.\d{4}E[+-]\d{2} (uGy/s|mR/s|mR/min) (OK|OVR|UND|ERR)$`)
	lm9Line     = regexp.MustCompile(`^L -?\d+(,\d+)? (cd/m2|fL) S[0129]$`)
	scpiNumber  = regexp.MustCompile(`^[+-]?\d\.\d{4}E[+-]\d{2}$`)
)

func TestVeltraneCommands(t *testing.T) {
	b, clk := manualBench(t, "tollemby-rise-room2.yaml", nil)
	d := dialectOf(b, RoleDosimeter)
	for _, tc := range []struct{ cmd, want string }{
		{"ID?", "VELTRANE KR-40 SN=KR40-1187 FW=2.3"},
		{"REMOTE", "OK"},
		{"UNIT UGY/S", "OK"},
		{"UNIT MR/S", "OK"},
		{"UNIT FURLONG", "ERR 10"},
		{"FLY", "ERR 10"},
	} {
		if got := d.command(tc.cmd); len(got) != 1 || got[0] != tc.want {
			t.Errorf("%q → %q, want %q", tc.cmd, got, tc.want)
		}
	}
	if got := d.command(""); got != nil {
		t.Errorf("empty line answered %q", got)
	}
	b.SetBeam(true)
	clk.Advance(5 * time.Second)
	kTP := ((273.15 + 23.5) / (273.15 + 20)) * (101.325 / 99.2)
	// In mR/s: 1 mR ↔ 8.764 µGy (units.GyPerRoentgen, NIST SP 811 and
	// W/e = 33.97 J/C), so the true 0.4635 µGy/s chamber rate, read by a
	// meter reading 0.9921 × true and a vented chamber at 23.5 °C and
	// 99.2 kPa (1/k_TP with T0 = 20 °C, P0 = 101.325 kPa: the TRS-398
	// formula), reads about 0.0507 mR/s.
	got := d.command("RD?")[0]
	if !kr40Reading.MatchString(got) || !strings.Contains(got, " mR/s OK") {
		t.Fatalf("reading %q does not match %v", got, kr40Reading)
	}
	v, _ := strconv.ParseFloat(strings.Fields(got)[1], 64)
	near(t, "mR/s reading", v, 0.45*1.03*(1-0.0079)/kTP/8.764, 0.03)
	d.command("UNIT MR/MIN")
	got = d.command("RD?")[0]
	v, _ = strconv.ParseFloat(strings.Fields(got)[1], 64)
	near(t, "mR/min reading", v, 60*0.45*1.03*(1-0.0079)/kTP/8.764, 0.03)
}

func TestOndrakelCommands(t *testing.T) {
	b, clk := manualBench(t, "pelverton-pulsed-scpi.yaml", nil)
	d := dialectOf(b, RoleDosimeter)
	for _, tc := range []struct {
		cmd  string
		want []string
	}{
		{"*IDN?", []string{"ONDRAKEL,DX-2,DX2-30417,1.08"}},
		{"*RST", nil},
		{"*CLS", nil},
		{"CONF:KRAT", nil},
		{":CONFigure:KRATe", nil}, // long form, mixed case: SCPI-99 Vol. 1, 6.2.1
		{"UNIT:KRAT?", []string{"UGY/S"}},
		{"SYST:ERR?", []string{`0,"No error"`}},
		{"BOGUS:CMD", nil},
		{"SYST:ERR?", []string{`-113,"Undefined header"`}},
		{"SYSTem:ERRor?", []string{`0,"No error"`}},
		{"*RST;UNIT:KRAT?", []string{"UGY/S"}},
	} {
		if got := d.command(tc.cmd); !slices.Equal(got, tc.want) {
			t.Errorf("%q → %q, want %q", tc.cmd, got, tc.want)
		}
	}
	b.SetBeam(true)
	clk.Advance(5 * time.Second)
	if got := d.command("READ?"); len(got) != 1 || !scpiNumber.MatchString(got[0]) {
		t.Errorf("READ? → %q", got)
	}
	if err := b.InjectFault(FaultSpec{Kind: FaultOverRange, Meter: RoleDosimeter, Duration: time.Second}); err != nil {
		t.Fatal(err)
	}
	// 9.9E37 is SCPI's overflow value (SCPI-99 Vol. 1, 7.2.1.5, from memory).
	if got := d.command("READ?"); !slices.Equal(got, []string{"9.9E37"}) {
		t.Errorf("over range READ? → %q", got)
	}
	if got := d.command("SYST:ERR?"); !slices.Equal(got, []string{`-222,"Data out of range"`}) {
		t.Errorf("after over range, SYST:ERR? → %q", got)
	}
	if err := b.InjectFault(FaultSpec{Kind: FaultWrongUnit, Meter: RoleDosimeter, Duration: time.Second, Unit: "uSv/h"}); err != nil {
		t.Fatal(err)
	}
	if got := d.command("UNIT:KRAT?"); !slices.Equal(got, []string{"USV/H"}) {
		t.Errorf("wrong unit: UNIT:KRAT? → %q", got)
	}
}

func TestVessoricCommands(t *testing.T) {
	b, clk := manualBench(t, "tollemby-rise-room2.yaml", nil)
	d := dialectOf(b, RolePhotometer)
	for _, tc := range []struct{ cmd, want string }{
		{"IDN", "VESSORIC LM-9 #LM9-5521"},
		{"STREAM 0", "ERR"},
		{"STREAM 51", "ERR"},
		{"STREAM ten", "ERR"},
		{"STREAM 10", "ACK"},
	} {
		if got := d.command(tc.cmd); len(got) != 1 || got[0] != tc.want {
			t.Errorf("%q → %q, want %q", tc.cmd, got, tc.want)
		}
	}
	if d.streamPeriod() != 100*time.Millisecond {
		t.Errorf("period after STREAM 10: %v", d.streamPeriod())
	}
	b.SetBeam(true)
	clk.Advance(5 * time.Second)
	line := d.streamLine()
	if !lm9Line.MatchString(line) {
		t.Errorf("stream line %q does not match %v", line, lm9Line)
	}
	if d.command("STOP") != nil || d.streamPeriod() != 0 {
		t.Error("STOP answered or did not stop")
	}
}

// TestDecimalComma: five significant digits, decimal comma, no exponent.
func TestDecimalComma(t *testing.T) {
	for _, tc := range []struct {
		v    float64
		want string
	}{{123.45, "123,45"}, {9999, "9999,0"}, {0.012345, "0,012345"}, {1.5, "1,5000"}, {0, "0,0000"}, {42.1, "42,100"}} {
		if got := decimalComma(tc.v); got != tc.want {
			t.Errorf("decimalComma(%v) = %q, want %q", tc.v, got, tc.want)
		}
	}
}

// TestFootLamberts: 1 fL = 3.426 259 cd/m² (NIST SP 811, Appendix B.9):
// the aged tube's photometer prints fL.
func TestFootLamberts(t *testing.T) {
	b, clk := manualBench(t, "wendlemoor-aged-tube.yaml", func(s *Scenario) {
		s.Photometer.Noise, s.Intensifier.QuantumNoise.Relative = 0, 0
	})
	d := dialectOf(b, RolePhotometer)
	d.command("STREAM 10")
	b.SetBeam(true)
	clk.Advance(20 * time.Second)
	f := strings.Fields(d.streamLine())
	if f[2] != "fL" {
		t.Fatalf("unit %q", f[2])
	}
	v, _ := strconv.ParseFloat(strings.Replace(f[1], ",", ".", 1), 64)
	tr := b.Truth()
	near(t, "luminance in fL", v, tr.PhotometerLuminance*(1-0.012)/3.426259, 2e-4)
}

// TestLinesDeterministic: with the same seed and the same control calls at
// the same clock times, the meters print the same lines.
func TestLinesDeterministic(t *testing.T) {
	run := func(seed int64) []string {
		b, clk := manualBench(t, "pelverton-pulsed-scpi.yaml", func(s *Scenario) { s.Seed = seed })
		dose, lum := dialectOf(b, RoleDosimeter), dialectOf(b, RolePhotometer)
		lum.command("STREAM 20")
		var out []string
		for i := range 300 {
			switch i {
			case 10:
				b.SetBeam(true)
			case 100:
				_ = b.SetFieldMode("15cm")
			case 150:
				_ = b.SetPhotometerPosition(0.9, 90)
			case 200:
				b.SetLeadDisk(true)
			case 250:
				b.SetBeam(false)
			}
			out = append(out, dose.command("READ?")...)
			out = append(out, lum.streamLine())
			clk.Advance(50 * time.Millisecond)
		}
		return out
	}
	a, b, c := run(5), run(5), run(6)
	if !slices.Equal(a, b) {
		for i := range a {
			if a[i] != b[i] {
				t.Fatalf("line %d differs: %q vs %q", i, a[i], b[i])
			}
		}
	}
	if slices.Equal(a, c) {
		t.Error("another seed printed the same lines")
	}
}

// FuzzCommands: no command makes a dialect panic or print a line with a
// line end inside it.
func FuzzCommands(f *testing.F) {
	for _, c := range []string{"ID?", "RD?", "UNIT MR/S", "*IDN?", "READ?;SYST:ERR?", ":UNIT:KRAT MR/MIN", "STREAM 50", "STOP", "IDN", "\x00\xff",
		"*IDN?;*OPC?", "*ESE 36;*ESE?", "*SRE 300", "*RST 5", "UNIT:KRAT MR/S;KRAT?", "SYST:ERR:NEXT?", "'a;b';*STB?", "::X", ":"} {
		f.Add(c)
	}
	b, clk := manualBench(f, "tollemby-rise-room2.yaml", nil)
	h, _ := manualBench(f, "pelverton-pulsed-scpi.yaml", nil)
	ds := []dialect{dialectOf(b, RoleDosimeter), dialectOf(b, RolePhotometer), dialectOf(h, RoleDosimeter)}
	f.Fuzz(func(t *testing.T, cmd string) {
		clk.Advance(10 * time.Millisecond)
		for _, d := range ds {
			for _, r := range d.command(cmd) {
				if strings.ContainsAny(r, "\r\n") {
					t.Fatalf("%T answered %q with a line end inside", d, r)
				}
			}
			if d.streamPeriod() < 0 {
				t.Fatalf("negative period after %q", cmd)
			}
		}
	})
}
