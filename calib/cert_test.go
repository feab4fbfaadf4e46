package calib

import (
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"kermalux/drivers/units"
)

const certDir = "../testdata/certificates"

func load(t testing.TB, name string) *Certificate {
	t.Helper()
	c, err := LoadCertificate(filepath.Join(certDir, name))
	if err != nil {
		t.Fatal(err)
	}
	return c
}

func day(s string) time.Time {
	d, err := time.Parse(time.DateOnly, s)
	if err != nil {
		panic(err)
	}
	return d
}

func TestExampleCertificates(t *testing.T) {
	files, err := filepath.Glob(filepath.Join(certDir, "*.yaml"))
	if err != nil || len(files) < 4 {
		t.Fatalf("example certificates: %d found, %v", len(files), err)
	}
	for _, f := range files {
		if _, err := LoadCertificate(f); err != nil {
			t.Errorf("%v", err)
		}
	}
	c := load(t, "veltrane-kr40-1187.yaml")
	if c.Number != "NRML-26-0318" || c.Model != "Veltrane KR-40" || c.Serial != "KR40-1187" {
		t.Errorf("identity = %q %q %q", c.Number, c.Model, c.Serial)
	}
	if c.Quantity != units.AirKermaRate || !c.Vented || c.RefTemperature != 20 || c.RefPressure != 101.325 {
		t.Errorf("chamber = %v vented %v T0 %v P0 %v", c.Quantity, c.Vented, c.RefTemperature, c.RefPressure)
	}
	if c.Along != AlongHVL || len(c.Points) != 4 || c.Points[0].BeamQuality.Name != "RQA3" {
		t.Errorf("table = %v %+v", c.Along, c.Points)
	}
	// "2.4 %" at k = 2 is a relative standard uncertainty of 1.2 % (GUM 4.3.3: u = U/k).
	if d := c.RelStdUnc() - 0.012; d > 1e-12 || d < -1e-12 {
		t.Errorf("relative standard uncertainty = %v, want 0.012", c.RelStdUnc())
	}
	if c.Backscatter != 1.27 || c.Resolution != 0.001 {
		t.Errorf("backscatter %v resolution %v", c.Backscatter, c.Resolution)
	}
	p := load(t, "vessoric-lm9-5521.yaml")
	if p.Quantity != units.Luminance || p.Coefficient != 1.012 || len(p.Points) != 0 {
		t.Errorf("photometer certificate = %+v", p)
	}
}

func TestValidOn(t *testing.T) {
	c := load(t, "veltrane-kr40-1187.yaml") // calibrated 2026-03-10, due 2027-03-10
	tests := []struct {
		day            string
		valid, dueSoon bool
		left           int
	}{
		{"2026-12-02", true, false, 98},
		{"2027-02-08", true, true, 30}, // exactly 30 days ahead: warned
		{"2027-02-07", true, false, 31},
		{"2027-03-10", true, true, 0}, // valid through its due date
		{"2027-03-11", false, false, -1},
		{"2026-03-09", false, false, 366}, // before the calibration
	}
	for _, tc := range tests {
		v := c.ValidOn(day(tc.day).Add(15 * time.Hour))
		if v.Valid != tc.valid || v.DueSoon != tc.dueSoon || v.DaysLeft != tc.left || v.Text == "" {
			t.Errorf("%s: %+v, want valid %v due soon %v days left %d", tc.day, v, tc.valid, tc.dueSoon, tc.left)
		}
	}
	old := load(t, "veltrane-kr40-1187-expired.yaml")
	if v := old.ValidOn(day("2026-12-02")); v.Valid || !strings.Contains(v.Text, "expired on 2025-03-04") {
		t.Errorf("expired certificate: %+v", v)
	}
}

// valid is a complete dosimeter certificate; the malformed cases edit it.
const valid = `certificate: T-1
laboratory: Test Laboratory
meter:
  model: Test Meter
  serial: SN-1
quantity: air_kerma_rate
calibrated: 2026-01-01
due: 2027-01-01
chamber:
  vented: true
  reference_temperature: 22 °C
  reference_pressure: 101.325 kPa
coefficients:
  along: hvl
  points:
    - {hvl_mm_al: 4, factor: 1.01}
    - {hvl_mm_al: 8, factor: 1.00}
uncertainty:
  expanded: 2 %
  coverage_factor: 2
`

func TestParseErrorsNameLineAndField(t *testing.T) {
	tests := []struct {
		name    string
		edit    func(string) string
		line    int
		field   string
		message string
	}{
		{"missing due", func(s string) string { return strings.Replace(s, "due: 2027-01-01\n", "", 1) }, 1, "due", "missing"},
		{"missing pressure", func(s string) string { return strings.Replace(s, "  reference_pressure: 101.325 kPa\n", "", 1) }, 9, "chamber.reference_pressure", "missing"},
		{"missing serial", func(s string) string { return strings.Replace(s, "  serial: SN-1\n", "", 1) }, 3, "meter.serial", "missing"},
		{"bad date", func(s string) string { return strings.Replace(s, "2027-01-01", "01/01/2027", 1) }, 8, "due", "date"},
		{"due before calibration", func(s string) string { return strings.Replace(s, "2027-01-01", "2025-01-01", 1) }, 8, "due", "not after"},
		{"unknown key", func(s string) string { return strings.Replace(s, "laboratory:", "labratory:", 1) }, 2, "labratory", "unknown field"},
		{"wrong unit", func(s string) string { return strings.Replace(s, "22 °C", "22 kPa", 1) }, 11, "chamber.reference_temperature", "not a unit of temperature"},
		{"factor not a number", func(s string) string { return strings.Replace(s, "factor: 1.00}", "factor: one}", 1) }, 17, "coefficients.points[1].factor", "number"},
		{"negative factor", func(s string) string { return strings.Replace(s, "factor: 1.00}", "factor: -1}", 1) }, 17, "coefficients.points[1].factor", "between 0.5 and 2"},
		// Issue 14 item 15: what no meter could have is refused with its line.
		{"factor 1e308", func(s string) string { return strings.Replace(s, "factor: 1.00}", "factor: 1e308}", 1) }, 17, "coefficients.points[1].factor", "between 0.5 and 2"},
		{"factor .nan", func(s string) string { return strings.Replace(s, "factor: 1.00}", "factor: .nan}", 1) }, 17, "coefficients.points[1].factor", "number"},
		{"factor .inf", func(s string) string { return strings.Replace(s, "factor: 1.00}", "factor: .inf}", 1) }, 17, "coefficients.points[1].factor", "number"},
		{"one coefficient NaN", func(s string) string {
			return s[:strings.Index(s, "coefficients:")] + "coefficient: NaN\n" + s[strings.Index(s, "uncertainty:"):]
		}, 13, "coefficient", "number"},
		{"one coefficient 1e308", func(s string) string {
			return s[:strings.Index(s, "coefficients:")] + "coefficient: 1e308\n" + s[strings.Index(s, "uncertainty:"):]
		}, 13, "coefficient", "between 0.5 and 2"},
		{"serial with right-to-left override", func(s string) string { return strings.Replace(s, "serial: SN-1", "serial: \"SN-\u202E1-NS\"", 1) }, 5, "meter.serial", `U+202E`},
		{"serial with bell", func(s string) string { return strings.Replace(s, "serial: SN-1", "serial: \"SN-1\\a\"", 1) }, 5, "meter.serial", `U+0007`},
		{"model with zero-width space", func(s string) string { return strings.Replace(s, "model: Test Meter", "model: \"Test\u200BMeter\"", 1) }, 4, "meter.model", `U+200B`},
		{"serial too long", func(s string) string {
			return strings.Replace(s, "serial: SN-1", "serial: "+strings.Repeat("9", 201), 1)
		}, 5, "meter.serial", "longer than the 200"},
		{"reference pressure 1e308", func(s string) string { return strings.Replace(s, "101.325 kPa", "1e308 kPa", 1) }, 12, "chamber.reference_pressure", "between 80 and 110"},
		{"reference temperature 293 °C", func(s string) string { return strings.Replace(s, "22 °C", "293 °C", 1) }, 11, "chamber.reference_temperature", "between 0 and 40"},
		{"duplicate point", func(s string) string { return strings.Replace(s, "hvl_mm_al: 8", "hvl_mm_al: 4", 1) }, 17, "coefficients.points", "same hvl"},
		{"no coefficient", func(s string) string {
			return s[:strings.Index(s, "coefficients:")] + s[strings.Index(s, "uncertainty:"):]
		}, 1, "coefficient", "missing"},
		{"uncertainty over 100 %", func(s string) string { return strings.Replace(s, "2 %", "200 %", 1) }, 19, "uncertainty.expanded", "between 0 and 100"},
		{"bad quantity", func(s string) string { return strings.Replace(s, "quantity: air_kerma_rate", "quantity: dose", 1) }, 6, "quantity", "expected"},
		{"syntax", func(s string) string { return strings.Replace(s, "  serial: SN-1", "  serial: [SN-1", 1) }, 0, "", "not valid YAML"},
		{"empty", func(string) string { return "# nothing\n" }, 1, "", "empty"},
	}
	if _, err := ParseCertificate("valid.yaml", []byte(valid)); err != nil {
		t.Fatalf("the unedited certificate must parse: %v", err)
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := ParseCertificate("bad.yaml", []byte(tc.edit(valid)))
			var fe *FileError
			if !errors.As(err, &fe) {
				t.Fatalf("error = %v, want a *FileError", err)
			}
			if (tc.line != 0 && fe.Line != tc.line) || fe.Key != tc.field || !strings.Contains(fe.Msg, tc.message) {
				t.Errorf("got line %d field %q msg %q (%v); want line %d field %q containing %q", fe.Line, fe.Key, fe.Msg, err, tc.line, tc.field, tc.message)
			}
			if !strings.HasPrefix(err.Error(), "bad.yaml:") {
				t.Errorf("error %q does not start with the file name", err)
			}
		})
	}
}

func TestLoadMissingFile(t *testing.T) {
	_, err := LoadCertificate(filepath.Join(t.TempDir(), "none.yaml"))
	if !errors.Is(err, os.ErrNotExist) {
		t.Errorf("error = %v, want not exist", err)
	}
}

func TestCoefficientAt(t *testing.T) {
	c := load(t, "veltrane-kr40-1187.yaml") // RQA3 3.8→1.021, RQA5 6.8→1.008, RQA7 9.2→1.003, RQA9 11.6→0.997
	tests := []struct {
		q    BeamQuality
		want float64
		out  bool
	}{
		{BeamQuality{Name: "RQA5"}, 1.008, false},                                              // HVL from the RQA table (6.8 mm Al)
		{BeamQuality{HVL: 6.8}, 1.008, false},                                                  // a table point
		{BeamQuality{HVL: 8.0}, 1.008 - 0.005*(1.2/2.4), false},                                // linear interpolation by hand: 1.0055
		{BeamQuality{HVL: 3.8}, 1.021, false},                                                  // lower end
		{BeamQuality{HVL: 11.6}, 0.997, false},                                                 // upper end
		{BeamQuality{HVL: 3.0}, 0, true},                                                       // below the table
		{BeamQuality{HVL: 12.5}, 0, true},                                                      // above the table
		{BeamQuality{Name: "RQA5", TubeVoltage: 70, HVL: 7.1}, 1.008 - 0.005*(0.3/2.4), false}, // stated HVL wins
		{BeamQuality{TubeVoltage: 80}, (1.008 + 1.003) / 2, false},                             // no HVL (phantom beam): along kV, 70→1.008, 90→1.003
		{BeamQuality{TubeVoltage: 130}, 0, true},                                               // by kV, above the table's 120 kV
	}
	for _, tc := range tests {
		got, err := c.CoefficientAt(tc.q)
		var ot *OutsideTableError
		if tc.out {
			if !errors.As(err, &ot) {
				t.Errorf("%+v: err = %v, want outside table", tc.q, err)
			}
			continue
		}
		if err != nil || abs(got-tc.want) > 1e-12 {
			t.Errorf("%+v = %v, %v; want %v", tc.q, got, err, tc.want)
		}
	}
	// Tube-voltage table.
	h := load(t, "ondrakel-dx2-30417.yaml")
	if got, err := h.CoefficientAt(BeamQuality{TubeVoltage: 80}); err != nil || abs(got-1.0055) > 1e-12 {
		t.Errorf("80 kV = %v, %v; want (1.000+1.011)/2 = 1.0055", got, err)
	}
	if _, err := h.CoefficientAt(BeamQuality{TubeVoltage: 40}); err == nil {
		t.Error("40 kV is below the table and must be refused")
	}
	// A table of beam qualities: names only.
	o := load(t, "veltrane-kr40-1187-expired.yaml")
	if got, err := o.CoefficientAt(BeamQuality{Name: "rqa7"}); err != nil || got != 1.004 {
		t.Errorf("RQA7 = %v, %v", got, err)
	}
	if _, err := o.CoefficientAt(BeamQuality{Name: "RQA9"}); err == nil {
		t.Error("RQA9 is not in the table and must be refused")
	}
}

func abs(x float64) float64 {
	if x < 0 {
		return -x
	}
	return x
}

func FuzzParseCertificate(f *testing.F) {
	bases := [][]byte{[]byte(valid)}
	files, _ := filepath.Glob(filepath.Join(certDir, "*.yaml"))
	for _, p := range files {
		b, err := os.ReadFile(p)
		if err != nil {
			f.Fatal(err)
		}
		bases = append(bases, b)
	}
	for i := range bases {
		f.Add(uint8(i), uint16(0), uint16(0), []byte{})
	}
	for _, whole := range []string{"certificate: [\n", "meter: {model: x}\nquantity: luminance\n", "- a\n- b\n",
		"---\na: 1\n---\nb: 2\n", "certificate: &a x\nlaboratory: *a\n"} {
		f.Add(uint8(0), uint16(0), uint16(len(valid)), []byte(whole))
	}
	f.Add(uint8(0), uint16(strings.Index(valid, "2024")), uint16(4), []byte("2099"))
	// An input edits one of the seed files (which) by writing patch at at
	// over drop bytes, so inputs stay a few bytes long (the fuzzer's
	// minimiser runs a number of inputs that grows with the square of an
	// input's length: whole files as inputs kept both workers minimising
	// for the whole run); a drop over the whole file writes any file.
	f.Fuzz(func(t *testing.T, which uint8, at, drop uint16, patch []byte) {
		base := bases[int(which)%len(bases)]
		off := int(at) % (len(base) + 1)
		data := append(append(append([]byte{}, base[:off]...), patch...), base[min(off+int(drop), len(base)):]...)
		c, err := ParseCertificate("fuzz.yaml", data)
		if err != nil {
			var fe *FileError
			if !errors.As(err, &fe) || fe.File != "fuzz.yaml" {
				t.Fatalf("error %v is not a *FileError naming the file", err)
			}
			return
		}
		if !c.Due.After(c.Calibrated) || !(c.Expanded > 0 && c.Expanded < 1) || c.CoverageFactor < 1 {
			t.Fatalf("accepted an inconsistent certificate: %+v", c)
		}
		if (c.Coefficient > 0) == (len(c.Points) > 0) {
			t.Fatalf("accepted a certificate with coefficient %v and %d points", c.Coefficient, len(c.Points))
		}
		for _, p := range c.Points {
			if !(p.Factor > 0) {
				t.Fatalf("accepted factor %v", p.Factor)
			}
		}
	})
}

func TestLoadDirAndPick(t *testing.T) {
	certs, err := LoadDir(certDir)
	if err != nil || len(certs) < 4 {
		t.Fatalf("%d certificates, %v", len(certs), err)
	}
	// Two certificates for KR40-1187: the current one is picked while
	// valid, the newer one even when both are out of date.
	if c := Pick(certs, "kr40-1187", day("2026-12-02")); c == nil || c.Number != "NRML-26-0318" {
		t.Errorf("picked %v", c)
	}
	if c := Pick(certs, "KR40-1187", day("2024-06-01")); c == nil || c.Number != "NRML-24-0291" {
		t.Errorf("in 2024 picked %v", c)
	}
	if c := Pick(certs, "KR40-1187", day("2028-01-01")); c == nil || c.Number != "NRML-26-0318" || c.ValidOn(day("2028-01-01")).Valid {
		t.Errorf("in 2028 picked %v", c)
	}
	if c := Pick(certs, "XX-1", day("2026-12-02")); c != nil {
		t.Errorf("unknown serial picked %v", c)
	}
	// A broken file is reported with its name; the good ones still load.
	dir := t.TempDir()
	if err := os.WriteFile(filepath.Join(dir, "good.yaml"), []byte(valid), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(dir, "broken.yaml"), []byte("certificate: [\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	certs, err = LoadDir(dir)
	if len(certs) != 1 || err == nil || !strings.Contains(err.Error(), "broken.yaml") {
		t.Errorf("%d certificates, %v", len(certs), err)
	}
}

// TestRefusedTextIsPrintedEscaped: the error that refuses a serial with a
// text-direction override shows it escaped, so the message itself cannot
// be reordered on a terminal or in a report (issue 14 item 15).
func TestRefusedTextIsPrintedEscaped(t *testing.T) {
	bad := strings.Replace(valid, "serial: SN-1", "serial: \"SN-\u202E1-NS\"", 1)
	_, err := ParseCertificate("rlo.yaml", []byte(bad))
	if err == nil {
		t.Fatal("a serial with U+202E was accepted")
	}
	if strings.ContainsRune(err.Error(), '\u202e') || !strings.Contains(err.Error(), `\u202e`) {
		t.Errorf("error %q must show the override escaped", err)
	}
	if !strings.HasPrefix(err.Error(), "rlo.yaml:5:") {
		t.Errorf("error %q does not name file and line", err)
	}
}

// TestLoadCertificateBoundsSize: a file far larger than any certificate is
// refused before it is parsed.
func TestLoadCertificateBoundsSize(t *testing.T) {
	path := filepath.Join(t.TempDir(), "huge.yaml")
	big := valid + "notes: |\n" + strings.Repeat("  "+strings.Repeat("x", 100)+"\n", 1000)
	if err := os.WriteFile(path, []byte(big), 0o600); err != nil {
		t.Fatal(err)
	}
	_, err := LoadCertificate(path)
	var fe *FileError
	if !errors.As(err, &fe) || !strings.Contains(fe.Msg, "larger than") || fe.File != path {
		t.Errorf("error = %v, want a file error saying the file is too large", err)
	}
}
