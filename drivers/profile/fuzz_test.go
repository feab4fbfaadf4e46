package profile_test

import (
	"errors"
	"math"
	"os"
	"strconv"
	"strings"
	"testing"

	"kermalux/drivers"
	"kermalux/drivers/profile"
)

func FuzzParseLine(f *testing.F) {
	for _, s := range []string{
		"RD +1.2340E-01 uGy/s OK", "RD +5.0000E+02 mR/min OVR", "RD -1.0E-99 mR/s UND", "ERR 10",
		"L 123,45 cd/m2 S0", "L 0,5 fL S9", "L 1.234,5 cd/m2 S0", "RD +1E+9999 uGy/s OK", "\xff\x00",
	} {
		f.Add(s)
	}
	kr := load(f, "veltrane-kr40.yaml")
	lm := load(f, "vessoric-lm9.yaml")
	f.Fuzz(func(t *testing.T, line string) {
		for _, p := range []*profile.Profile{kr, lm} {
			v, u, st, err := p.ParseLine(line)
			if err != nil {
				if !errors.Is(err, drivers.ErrGarbled) && !errors.Is(err, drivers.ErrUnit) {
					t.Fatalf("%q: error %v is neither garbled nor unit", line, err)
				}
				continue
			}
			if math.IsNaN(v) || math.IsInf(v, 0) {
				t.Fatalf("%q: non-finite value %v accepted", line, v)
			}
			switch st {
			case drivers.StatusOK, drivers.StatusOverRange, drivers.StatusUnderRange, drivers.StatusFault:
			default:
				t.Fatalf("%q: status %q", line, st)
			}
			if _, cerr := p.Convert(v, u); cerr != nil {
				t.Fatalf("%q: accepted unit %q does not convert: %v", line, u, cerr)
			}
		}
	})
}

// FuzzNumbers checks the number reader against the standard library's
// strconv.ParseFloat: whatever a point-decimal format accepts must be the
// value strconv reads from the same text.
func FuzzNumbers(f *testing.F) {
	for _, s := range []string{"+1.2340E-01", "123", "-0.5e+3", ".5", "5.", "1e400", "0x10", "1_0", "Inf"} {
		f.Add(s)
	}
	n := profile.Numbers{DecimalMark: '.', Sign: profile.SignOptional, Exponent: profile.ExponentOptional}
	f.Fuzz(func(t *testing.T, s string) {
		v, err := n.Parse(s)
		if err != nil {
			return
		}
		want, serr := strconv.ParseFloat(s, 64)
		if serr != nil || want != v {
			t.Fatalf("%q: got %v, strconv says %v, %v", s, v, want, serr)
		}
		// The same digits with a decimal comma read the same.
		c := profile.Numbers{DecimalMark: ',', Sign: profile.SignOptional, Exponent: profile.ExponentOptional}
		if v2, err := c.Parse(strings.Replace(s, ".", ",", 1)); err != nil || v2 != v {
			t.Fatalf("%q with a comma: %v, %v", s, v2, err)
		}
	})
}

func FuzzParse(f *testing.F) {
	bases := [][]byte{[]byte(minimal)}
	for _, name := range []string{"veltrane-kr40.yaml", "vessoric-lm9.yaml"} {
		b, err := os.ReadFile("../../testdata/profiles/" + name)
		if err != nil {
			f.Fatal(err)
		}
		bases = append(bases, b)
	}
	for i := range bases {
		f.Add(uint8(i), uint16(0), uint16(0), []byte{})
	}
	for _, whole := range []string{"reading: {mode: streaming, start: {send: GO}, period: 1ms}\n", "\t- [}",
		"name: \n0:000000000\nquantity: 00000000000000\nserial:\n  baud: 0000\n  send_line_end: 00\n  receive_line_end: 0000\nreading:\n  mode: 000000\n  send: 0\n  reply: 00\nunits: !00000000000000\n  00: 0000\n000000000008: 00000"} {
		f.Add(uint8(0), uint16(0), uint16(len(minimal)), []byte(whole))
	}
	// An input edits one of the seed files (which) by writing patch at at
	// over drop bytes, so inputs stay a few bytes long (the fuzzer's
	// minimiser runs a number of inputs that grows with the square of an
	// input's length: whole files as inputs kept both workers minimising
	// for the whole run); a drop over the whole file writes any file.
	f.Fuzz(func(t *testing.T, which uint8, at, drop uint16, patch []byte) {
		base := bases[int(which)%len(bases)]
		off := int(at) % (len(base) + 1)
		data := append(append(append([]byte{}, base[:off]...), patch...), base[min(off+int(drop), len(base)):]...)
		p, err := profile.Parse("fuzz.yaml", data)
		if err != nil {
			var pe *profile.Error
			if !errors.As(err, &pe) || pe.File != "fuzz.yaml" {
				t.Fatalf("error %v is not a positioned profile error", err)
			}
			return
		}
		if p.Pattern == nil || len(p.Units) == 0 || !p.Quantity.Valid() {
			t.Fatalf("accepted an incomplete profile: %+v", p)
		}
		p.ParseLine("RD +1.0E+00 uGy/s OK")
	})
}

// BenchmarkParseLine parses a streamed photometer line; "pattern-only",
// the baseline in the same run, is the bare regular-expression match the
// parser cannot avoid, so the difference is the cost of number, status
// and unit handling.
func BenchmarkParseLine(b *testing.B) {
	lm := load(b, "vessoric-lm9.yaml")
	const line = "L 123,45 cd/m2 S0"
	b.Run("pattern-only", func(b *testing.B) {
		b.ReportAllocs()
		for range b.N {
			if lm.Pattern.FindStringSubmatchIndex(line) == nil {
				b.Fatal("no match")
			}
		}
	})
	b.Run("ParseLine", func(b *testing.B) {
		b.ReportAllocs()
		for range b.N {
			if _, _, _, err := lm.ParseLine(line); err != nil {
				b.Fatal(err)
			}
		}
	})
}
