package profile_test

import (
	"errors"
	"flag"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"kermalux/drivers"
	"kermalux/drivers/profile"
)

var update = flag.Bool("update", false, "rewrite golden files")

// minimal is a small valid profile the error cases below modify.
const minimal = `name: Test meter
quantity: air_kerma_rate
serial:
  baud: 9600
  send_line_end: cr
  receive_line_end: crlf
reading:
  mode: polled
  send: "RD?"
  reply: '^RD (?P<value>\S+) (?P<unit>\S+) (?P<status>\S+)$'
units: [uGy/s]
status:
  ok: [OK]
  over_range: [OVR]
`

func TestMinimalIsValid(t *testing.T) {
	p, err := profile.Parse("minimal.yaml", []byte(minimal))
	if err != nil {
		t.Fatal(err)
	}
	if p.Line.Baud != 9600 || p.Mode != profile.Polled || p.Query != "RD?" || p.ReplyTimeout.Seconds() != 1 {
		t.Errorf("parsed %+v", p)
	}
}

// TestMalformed checks that each malformed profile is refused with the
// file, line and column and what was expected (golden messages).
func TestMalformed(t *testing.T) {
	cases := []struct {
		name string
		old  string // replaced in minimal ("" appends new)
		new  string
	}{
		{"unknown key", "units:", "unit_list:"},
		{"unknown nested key", "  baud: 9600", "  baud: 9600\n  speed: fast"},
		{"wrong type", "baud: 9600", "baud: fast"},
		{"bad yaml", "  mode: polled", "  mode: [polled"},
		{"missing quantity", "quantity: air_kerma_rate\n", ""},
		{"bad quantity", "quantity: air_kerma_rate", "quantity: dose"},
		{"bad framing", "send_line_end: cr", "send_line_end: semicolon"},
		{"bad parity", "  baud: 9600", "  baud: 9600\n  parity: often"},
		{"flow control", "  baud: 9600", "  baud: 9600\n  flow_control: rts-cts"},
		{"bad mode", "mode: polled", "mode: sometimes"},
		{"polled without send", "  send: \"RD?\"\n", ""},
		{"bad regexp", `(?P<value>\S+) (?P<unit>`, `(?P<value>\S+ (?P<unit>`},
		{"no value group", `(?P<value>\S+)`, `(?P<number>\S+)`},
		{"unit of wrong quantity", "units: [uGy/s]", "units: [uGy/s, cd/m2]"},
		{"unknown unit", "units: [uGy/s]", "units: [uSv/h]"},
		{"duplicate status", "over_range: [OVR]", "over_range: [OK]"},
		{"bad duration", "  mode: polled", "  mode: polled\n  reply_timeout: soon"},
		{"bad decimal mark", "units:", "numbers:\n  decimal_mark: ';'\nunits:"},
		{"setup without send", "reading:", "setup:\n  - expect: OK\nreading:"},
		{"identify group", "reading:", "identify:\n  send: ID?\n  reply: '(?P<colour>.*)'\nreading:"},
		{"no unit anywhere", ` (?P<unit>\S+)`, ``},
		{"list for mapping", "serial:\n  baud: 9600\n  send_line_end: cr\n  receive_line_end: crlf", "serial: [9600]"},
		{"empty file", minimal, ""},
		{"streaming without period", "  mode: polled\n  send: \"RD?\"", "  mode: streaming\n  start:\n    send: GO"},
		// Every size and count is bounded (issue 14, item 11: 2^34 for
		// longest_line exhausted memory at open).
		{"huge longest line", "  receive_line_end: crlf", "  receive_line_end: crlf\n  longest_line: 17179869184"},
		{"longest line above the limit", "  receive_line_end: crlf", "  receive_line_end: crlf\n  longest_line: 65537"},
		{"too many set-up commands", "reading:", "setup:\n" + strings.Repeat("  - {send: X}\n", 33) + "reading:"},
		{"over-long command", "  send: \"RD?\"", "  send: \"" + strings.Repeat("R", 257) + "\""},
		{"over-long pattern", `(?P<status>\S+)$`, `(?P<status>\S+)` + strings.Repeat("x?", 520) + `$`},
		{"too many units", "units: [uGy/s]", "units: [" + strings.Repeat("uGy/s, ", 16) + "uGy/s]"},
		{"too many status tokens", "over_range: [OVR]", "over_range: [" + strings.Repeat("O, ", 32) + "O]"},
		{"over-long name", "name: Test meter", "name: " + strings.Repeat("n", 129)},
		{"silent periods above the limit", "  mode: polled\n  send: \"RD?\"", "  mode: streaming\n  period: 100ms\n  silent_periods: 100000"},
		{"period of a day", "  mode: polled", "  mode: polled\n  period: 24h"},
		{"streaming start without send", "  mode: polled\n  send: \"RD?\"", "  mode: streaming\n  period: 100ms\n  start: {expect: ACK}"},
	}
	var golden strings.Builder
	for _, tc := range cases {
		src := minimal
		if tc.old == "" {
			src += tc.new
		} else {
			if !strings.Contains(src, tc.old) {
				t.Fatalf("%s: %q not in the minimal profile", tc.name, tc.old)
			}
			src = strings.Replace(src, tc.old, tc.new, 1)
		}
		_, err := profile.Parse("bad.yaml", []byte(src))
		if err == nil {
			t.Errorf("%s: accepted", tc.name)
			continue
		}
		var pe *profile.Error
		if !errors.As(err, &pe) || pe.File != "bad.yaml" || pe.Line == 0 {
			t.Errorf("%s: %v: want a *profile.Error with file and line", tc.name, err)
		}
		fmt.Fprintf(&golden, "%s\n\t%s\n", tc.name, strings.ReplaceAll(err.Error(), "\n", "\n\t"))
	}
	const file = "testdata/malformed.golden"
	if *update {
		if err := os.WriteFile(file, []byte(golden.String()), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(file)
	if err != nil {
		t.Fatalf("%v (run with -update to create it)", err)
	}
	if got := golden.String(); got != string(want) {
		t.Errorf("messages differ from %s (run with -update after checking):\n%s", file, got)
	}
}

func TestShippedProfiles(t *testing.T) {
	kr := load(t, "veltrane-kr40.yaml")
	// meters.md: 9600 8N1, commands end in CR, replies in CR LF.
	if l := kr.Line; l.Baud != 9600 || l.DataBits != 8 || l.Parity != "none" || l.StopBits != 1 || l.SendEnd != "cr" || l.ReceiveEnd != "crlf" {
		t.Errorf("KR-40 line settings %+v", l)
	}
	lm := load(t, "vessoric-lm9.yaml")
	// meters.md: 19200 8N1, LF both ways, STREAM 10 → ACK, 10 readings/s.
	if l := lm.Line; l.Baud != 19200 || l.SendEnd != "lf" || l.ReceiveEnd != "lf" || lm.Start.Send != "STREAM 10" || lm.Start.Expect != "ACK" || lm.Period.Milliseconds() != 100 {
		t.Errorf("LM-9 settings %+v", lm)
	}
}

func TestParseLine(t *testing.T) {
	kr := load(t, "veltrane-kr40.yaml")
	lm := load(t, "vessoric-lm9.yaml")
	tests := []struct {
		p      *profile.Profile
		line   string
		value  float64
		unit   string
		status drivers.Status
		err    error
	}{
		// Lines as meters.md prints them.
		{kr, "RD +1.2340E-01 uGy/s OK", 0.1234, "uGy/s", drivers.StatusOK, nil},
		{kr, "RD -2.0000E-03 mR/min UND", -0.002, "mR/min", drivers.StatusUnderRange, nil},
		{kr, "RD +5.0000E+02 uGy/s OVR", 500, "uGy/s", drivers.StatusOverRange, nil},
		{kr, "RD +0.0000E+00 uGy/s ERR", 0, "uGy/s", drivers.StatusFault, nil},
		{kr, "RD 1.2340E-01 uGy/s OK", 0, "", "", drivers.ErrGarbled},  // sign required
		{kr, "RD +1.2340 uGy/s OK", 0, "", "", drivers.ErrGarbled},     // exponent required
		{kr, "RD +1,2340E-01 uGy/s OK", 0, "", "", drivers.ErrGarbled}, // decimal comma
		{kr, "RD +1.2340E-01 uSv/h OK", 1.234e-1, "uSv/h", drivers.StatusOK, drivers.ErrUnit},
		{kr, "RD +1.2340E-01 uGy/s", 0, "", "", drivers.ErrGarbled},
		{kr, "RD +Inf uGy/s OK", 0, "", "", drivers.ErrGarbled},
		{kr, "RD +0x1p-2 uGy/s OK", 0, "", "", drivers.ErrGarbled},
		{kr, "RD +1E999 uGy/s OK", 0, "", "", drivers.ErrGarbled},
		{lm, "L 123,45 cd/m2 S0", 123.45, "cd/m2", drivers.StatusOK, nil},
		{lm, "L 0,01 fL S2", 0.01, "fL", drivers.StatusUnderRange, nil},
		{lm, "L 9999 cd/m2 S1", 9999, "cd/m2", drivers.StatusOverRange, nil},
		{lm, "L 123.45 cd/m2 S0", 0, "", "", drivers.ErrGarbled},
		{lm, "L 123,45 cd/m2 S5", 0, "", "", drivers.ErrGarbled},
		{lm, "L 123,45 lux S0", 123.45, "lux", drivers.StatusOK, drivers.ErrUnit},
		{lm, "", 0, "", "", drivers.ErrGarbled},
	}
	for _, tc := range tests {
		v, u, st, err := tc.p.ParseLine(tc.line)
		if tc.err != nil {
			if !errors.Is(err, tc.err) {
				t.Errorf("%q: got %v %q %s %v, want %v", tc.line, v, u, st, err, tc.err)
			}
			continue
		}
		if err != nil || v != tc.value || u != tc.unit || st != tc.status {
			t.Errorf("%q: got %v %q %s %v, want %v %q %s", tc.line, v, u, st, err, tc.value, tc.unit, tc.status)
		}
	}
}

func TestNumbers(t *testing.T) {
	// Expected values are the decimal numbers as written; the formats are
	// those of meters.md (sign and exponent; decimal comma) and the
	// common European and English thousands groupings (common practice).
	eu := profile.Numbers{DecimalMark: ',', ThousandsMark: '.', Sign: profile.SignOptional, Exponent: profile.ExponentNone}
	en := profile.Numbers{DecimalMark: '.', ThousandsMark: ',', Sign: profile.SignOptional, Exponent: profile.ExponentOptional}
	sp := profile.Numbers{DecimalMark: '.', ThousandsMark: ' ', Sign: profile.SignNone, Exponent: profile.ExponentNone}
	tests := []struct {
		n    profile.Numbers
		s    string
		want float64
		ok   bool
	}{
		{eu, "1.234,5", 1234.5, true},
		{eu, "12.345.678,9", 12345678.9, true},
		{eu, "123,45", 123.45, true},
		{eu, "-0,5", -0.5, true},
		{eu, "1.23,4", 0, false}, // a group of two
		{eu, "1234.5", 0, false}, // a group of one after the mark
		{eu, "1,2E3", 0, false},  // no exponent in this format
		{eu, ",5", 0.5, true},    // leading decimal mark
		{eu, "5,", 5, true},      // trailing decimal mark
		{eu, ".123", 0, false},   // thousands mark first
		{en, "1,234.5", 1234.5, true},
		{en, "1.5e-3", 0.0015, true},
		{en, "+2E+2", 200, true},
		{en, "2E", 0, false},
		{en, "1_000", 0, false},
		{en, "", 0, false},
		{en, "-", 0, false},
		{en, "nan", 0, false},
		{sp, "1 000 000", 1e6, true},
		{sp, "-1", 0, false},
		{sp, "1  000", 0, false},
	}
	for _, tc := range tests {
		got, err := tc.n.Parse(tc.s)
		if (err == nil) != tc.ok || (tc.ok && got != tc.want) {
			t.Errorf("%+q in %+v: got %v, %v; want %v ok=%v", tc.s, tc.n, got, err, tc.want, tc.ok)
		}
	}
}

// TestFormatExample keeps the example in FORMAT.md valid.
func TestFormatExample(t *testing.T) {
	doc, err := os.ReadFile("FORMAT.md")
	if err != nil {
		t.Fatal(err)
	}
	_, rest, ok := strings.Cut(string(doc), "```yaml\n")
	example, _, ok2 := strings.Cut(rest, "```")
	if !ok || !ok2 {
		t.Fatal("FORMAT.md has no yaml example")
	}
	p, err := profile.Parse("FORMAT.md example", []byte(example))
	if err != nil {
		t.Fatal(err)
	}
	if _, _, st, err := p.ParseLine("RD +1.2340E-01 uGy/s OK"); err != nil || st != drivers.StatusOK {
		t.Errorf("example profile reads a meters.md line as %s, %v", st, err)
	}
}

// A file larger than the format allows is refused before it is parsed.
func TestProfileFileSizeBounded(t *testing.T) {
	big := minimal + "# " + strings.Repeat("x", profile.MaxFileSize) + "\n"
	_, err := profile.Parse("big.yaml", []byte(big))
	var pe *profile.Error
	if !errors.As(err, &pe) || pe.Line != 1 || !strings.Contains(err.Error(), "at most") {
		t.Fatalf("got %v; want big.yaml:1:1 and the limit", err)
	}
}

// A meter that streams unprompted needs no start command (issue:
// reading.start was documented as optional but refused).
func TestStreamingWithoutStart(t *testing.T) {
	src := strings.Replace(minimal, "  mode: polled\n  send: \"RD?\"", "  mode: streaming\n  period: 100ms", 1)
	p, err := profile.Parse("unprompted.yaml", []byte(src))
	if err != nil {
		t.Fatal(err)
	}
	if p.Mode != profile.Streaming || p.Start.Send != "" {
		t.Errorf("parsed %+v", p)
	}
}

// A status word in place of the unit or the value is described with an
// alternative in the pattern: the reading has that status and no value.
func TestStatusWordInPlaceOfUnit(t *testing.T) {
	src := strings.Replace(minimal, `'^RD (?P<value>\S+) (?P<unit>\S+) (?P<status>\S+)$'`,
		`'^RD (?:(?P<value>[-+0-9.E]+) (?:(?P<unit>uGy/s)|(?P<status>OVER|UNDER))|(?P<status2>x)?(?P<status>OVER))$'`, 1)
	if _, err := profile.Parse("status.yaml", []byte(src)); err == nil {
		t.Fatal("a group named status2 accepted")
	}
	src = strings.Replace(minimal, `'^RD (?P<value>\S+) (?P<unit>\S+) (?P<status>\S+)$'`,
		`'^RD (?P<value>[-+0-9.E]+) (?:(?P<unit>uGy/s)|(?P<status>OVER|UNDER))$'`, 1)
	src = strings.Replace(src, "status:\n  ok: [OK]\n  over_range: [OVR]\n", "status:\n  over_range: [OVER]\n  under_range: [UNDER]\n", 1)
	p, err := profile.Parse("status.yaml", []byte(src))
	if err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct {
		line    string
		st      drivers.Status
		noValue bool
	}{
		{"RD +1.5E+00 uGy/s", drivers.StatusOK, false},
		{"RD +9.9999E+02 OVER", drivers.StatusOverRange, true},
		{"RD +0.0000E+00 UNDER", drivers.StatusUnderRange, true},
	} {
		v, u, st, err := p.ParseLine(tc.line)
		if st != tc.st || errors.Is(err, profile.ErrNoValue) != tc.noValue || (!tc.noValue && (err != nil || v != 1.5 || u != "uGy/s")) {
			t.Errorf("%q → %v %q %s %v; want %s (no value %v)", tc.line, v, u, st, err, tc.st, tc.noValue)
		}
	}
}

// Load reads a profile file at most to its bound (issue 14 item 11): a
// larger file is refused naming the file and the bound, not read whole
// first.
func TestProfileLoadBounded(t *testing.T) {
	p := filepath.Join(t.TempDir(), "huge.yaml")
	if err := os.WriteFile(p, []byte(minimal+"# "+strings.Repeat("x", profile.MaxFileSize)+"\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	_, err := profile.Load(p)
	var pe *profile.Error
	if !errors.As(err, &pe) || pe.File != p || !strings.Contains(err.Error(), "larger than 64 KiB: not a meter profile") {
		t.Fatalf("got %v; want %s named with the 64 KiB bound", err, p)
	}
}
