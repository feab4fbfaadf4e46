package script

import (
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"kermalux/calib"
	"kermalux/procedures/builtin"
)

func TestDurations(t *testing.T) {
	tests := []struct {
		in   string
		want time.Duration
		bad  bool
	}{
		{"120 s", 120 * time.Second, false},
		{"2 min", 120 * time.Second, false}, // 1 min = 60 s (SI, NIST SP 811 Table 6)
		{"0.5 s", 500 * time.Millisecond, false},
		{"20", 0, true},    // no unit
		{"20 kV", 0, true}, // not a time
		{"-5 s", 0, true},  // negative
		{"soon", 0, true},  // not a number
		{"1e9 s", 0, true}, // implausible
	}
	for _, tt := range tests {
		got, err := durationOf(tt.in)
		if (err != nil) != tt.bad || got != tt.want {
			t.Errorf("durationOf(%q) = %v, %v; want %v, bad %v", tt.in, got, err, tt.want, tt.bad)
		}
	}
}

func TestFractions(t *testing.T) {
	tests := []struct {
		in   string
		want float64
		bad  bool
	}{
		{"2 %", 0.02, false}, // per cent: 1 % = 0.01 (ISO 80000-1)
		{"0.02", 0.02, false},
		{"100 %", 1, false},
		{"0 %", 0, true},
		{"150 %", 0, true},
		{"2 mm", 0, true},
	}
	for _, tt := range tests {
		got, err := fractionOf(tt.in)
		if (err != nil) != tt.bad || math.Abs(got-tt.want) > 1e-15 {
			t.Errorf("fractionOf(%q) = %v, %v; want %v, bad %v", tt.in, got, err, tt.want, tt.bad)
		}
	}
}

func TestFilters(t *testing.T) {
	tests := []struct {
		in  string
		mm  float64
		mat string
		bad bool
	}{
		{"21 mm Al", 21, "Al", false},
		{"0.1 cm Cu", 1, "Cu", false}, // 1 cm = 10 mm
		{"21 mm", 0, "", true},        // no material
		{"21 mm Zz", 0, "", true},     // unknown material
		{"70 kV", 0, "", true},        // a voltage, not a thickness
		{"21 kg Al", 0, "", true},
	}
	for _, tt := range tests {
		mm, mat, err := filterOf(tt.in)
		if (err != nil) != tt.bad || math.Abs(mm-tt.mm) > 1e-12 || mat != tt.mat {
			t.Errorf("filterOf(%q) = %v %q %v", tt.in, mm, mat, err)
		}
	}
}

func TestPositions(t *testing.T) {
	tests := []struct {
		in     string
		label  string
		radius float64
		angle  float64
		bad    bool
	}{
		{"centre", "centre", 0, 0, false},
		{"up 0.9 r", "up 0.9 r", 0.9, 90, false},
		{"down-left 0.5 r", "down-left 0.5 r", 0.5, 225, false},
		{"left 1.2 r", "", 0, 0, true},
		{"up 0 r", "", 0, 0, true},
		{"up 0.9", "", 0, 0, true},
		{"north 0.5 r", "", 0, 0, true},
	}
	for _, tt := range tests {
		p, err := positionOf(tt.in)
		if (err != nil) != tt.bad || p.Label != tt.label || p.Radius != tt.radius || p.Angle != tt.angle {
			t.Errorf("positionOf(%q) = %+v, %v", tt.in, p, err)
		}
	}
}

// TestEnterRangeConversion: a range written in another unit than the one
// asked is converted: 50 °F = 10 °C and 104 °F = 40 °C, from
// t/°C = (t/°F − 32) / 1.8 (NIST SP 811, B.9); 760 mmHg = 101.325 kPa
// (standard atmosphere, NIST SP 811).
func TestEnterRangeConversion(t *testing.T) {
	src := `name: r
title: R
version: "1"
beam_budget: 0 s
meters: []
steps:
  - id: t
    kind: enter
    range: 50 to 104 °F
    unit: °C
    name: temperature
  - id: p
    kind: enter
    name: pressure
    unit: kPa
    range: 600 to 760 mmHg
    default: 760 mmHg
`
	p, err := Parse("r.yaml", []byte(src))
	if err != nil {
		t.Fatal(err)
	}
	e := p.Steps[0].Enter
	if math.Abs(e.Min-10) > 1e-9 || math.Abs(e.Max-40) > 1e-9 || e.Quantity != "temperature" {
		t.Errorf("temperature range = %v to %v %s", e.Min, e.Max, e.Unit)
	}
	e = p.Steps[1].Enter
	if math.Abs(e.Max-101.325) > 1e-3 || math.Abs(e.Default-101.325) > 1e-3 || !e.HasDefault {
		t.Errorf("pressure = %v to %v default %v", e.Min, e.Max, e.Default)
	}
}

// TestConversionFactorUnit: G_x per µGy/s = G_x per mR/s / 8.76
// (reference.md: 1 mR ↔ 8.76 µGy with W/e = 33.97 J/C); and 1 fL =
// 3.426 259 cd/m² (NIST SP 811).
func TestConversionFactorUnit(t *testing.T) {
	tests := []struct {
		unit string
		want float64
		tol  float64
	}{
		{"", 1, 0},
		{"cd/m² per µGy/s", 1, 1e-12},
		{"cd/m2 per mR/s", 1 / 8.76, 1e-3 / 8.76},
		{"fL per µGy/s", 3.426259, 1e-6},
	}
	for _, tt := range tests {
		got, err := conversionFactorUnit(tt.unit)
		if err != nil || math.Abs(got-tt.want) > tt.tol {
			t.Errorf("conversionFactorUnit(%q) = %v, %v; want %v", tt.unit, got, err, tt.want)
		}
	}
	if _, err := conversionFactorUnit("kV per s"); err == nil {
		t.Error("kV per s accepted as a conversion factor unit")
	}
}

// TestBeamQualitiesAreCalibs (observation 10: the checker accepted
// qualities the corrections did not know): a procedure naming a quality
// parses exactly when calib's corrections can place it in a certificate
// table along half-value layer, and the setup it derives is IEC 61267's
// (tube voltage and added aluminium: RQA3 50 kV 10 mm, RQA5 70 kV 21 mm,
// RQA7 90 kV 30 mm, RQA9 120 kV 40 mm, as /work/shared/reference.md
// tabulates them).
func TestBeamQualitiesAreCalibs(t *testing.T) {
	cert := &calib.Certificate{Number: "T", Along: calib.AlongHVL, Points: []calib.Point{
		{BeamQuality: calib.BeamQuality{HVL: 1}, Factor: 1}, {BeamQuality: calib.BeamQuality{HVL: 20}, Factor: 1}}}
	want := map[string][2]float64{"RQA3": {50, 10}, "RQA5": {70, 21}, "RQA7": {90, 30}, "RQA9": {120, 40}}
	for i := 1; i <= 10; i++ {
		name := fmt.Sprintf("RQA%d", i)
		src := head + "  - id: a\n    kind: measure\n    read: {dosimeter: air_kerma_rate}\n    beam: on\n    beam_quality: " + name + "\n"
		_, err := Parse("q.yaml", []byte(src))
		refused := false
		for _, p := range asProblems(err) {
			refused = refused || strings.Contains(p.Reason, "unknown radiation quality")
		}
		_, cerr := cert.CoefficientAt(calib.BeamQuality{Name: name})
		if refused != (cerr != nil) {
			t.Errorf("%s: checker refuses %v, but calib's coefficient lookup gives error %v", name, refused, cerr)
		}
		q, ok := beamQuality(name)
		if w, sourced := want[name]; sourced && (!ok || q.TubeVoltage != w[0] || q.AddedAl != w[1]) {
			t.Errorf("%s = %v kV, %v mm Al; IEC 61267 gives %v", name, q.TubeVoltage, q.AddedAl, w)
		}
	}
}

// FuzzParse: no input makes the parser, the checker or flatten panic, and
// every problem names the file and has a line when it has a column.
func FuzzParse(f *testing.F) {
	var bases [][]byte
	for _, n := range builtin.Names() {
		data, err := builtin.Read(n)
		if err != nil {
			f.Fatal(err)
		}
		bases = append(bases, data)
	}
	for _, dir := range []string{badDir, goodDir} {
		files, _ := filepath.Glob(filepath.Join(dir, "*.yaml"))
		for _, file := range files {
			data, err := os.ReadFile(file)
			if err != nil {
				f.Fatal(err)
			}
			bases = append(bases, data)
		}
	}
	for i := range bases {
		f.Add(uint8(i), uint16(0), uint16(0), []byte{})
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
		p, err := Parse("fuzz.yaml", data)
		if ps, ok := err.(Problems); ok {
			for _, q := range ps {
				if q.Pos.File != "fuzz.yaml" || (q.Pos.Col > 0 && q.Pos.Line == 0) || q.Reason == "" {
					t.Fatalf("bad problem %+v", q)
				}
			}
		} else if err != nil {
			t.Fatalf("Parse returned %T, not Problems: %v", err, err)
		}
		if p == nil {
			return
		}
		// Includes resolve only to the built-ins (the file is not on disk).
		_ = Check(p, Env{FieldModes: []string{"a", "b"}})
		if err == nil {
			if fl, ferr := Flatten(p, Env{FieldModes: []string{"a", "b"}}); ferr == nil {
				for i, s := range fl.Steps {
					if s.Index != i+1 || s.Of != len(fl.Steps) || s.Step.Kind == KindInclude || s.Step.Kind == KindPerFieldMode {
						t.Fatalf("bad flat step %d: %+v", i, s)
					}
				}
			}
		}
	})
}
