package bench

import (
	"errors"
	"strings"
	"testing"

	"kermalux/drivers/filepos"
)

const goodBench = `site: Tollemby Rise Clinic
room: Room 2
intensifier:
  serial: HV-2291
  field_modes:
    - {name: 32cm, diameter_mm: 320}
meters:
  - {name: dosimeter, role: dosimeter, profile: d.yaml}
  - {name: photometer, role: photometer, profile: p.yaml}
`

// Semantic errors carry the file and the line of the key; safety limits
// have a plausible range; YAML's .nan and .inf are refused (a NaN used to
// become the default in silence, and 1e308 switched the kerma ceiling off);
// control characters are refused and shown escaped.
func TestBenchSemanticErrors(t *testing.T) {
	for _, c := range []struct {
		name, extra string
		line        int
		want        string
	}{
		{"ceiling huge", "limits:\n  kerma_ceiling_ugy_s: 1e308\n", 11, "limits.kerma_ceiling_ugy_s: 1e+308 µGy/s is outside the plausible range 0.01 to 100 µGy/s"},
		{"ceiling NaN", "limits:\n  kerma_ceiling_ugy_s: .nan\n", 11, "NaN is not a number"},
		{"ceiling inf", "limits:\n  kerma_ceiling_ugy_s: .inf\n", 11, "+Inf is not a number"},
		{"ceiling negative", "limits:\n  kerma_ceiling_ugy_s: -3\n", 11, "outside the plausible range"},
		{"precision NaN", "limits:\n  precision: .nan\n", 11, "limits.precision: NaN"},
		{"baseline fraction", "limits:\n  baseline_fraction: 2\n", 11, "limits.baseline_fraction: 2"},
		{"temperature", "defaults:\n  temperature_c: 2000\n", 11, "defaults.temperature_c: 2000 °C"},
		{"spec NaN", "limits:\n  action:\n    conversion_factor_min: .nan\n", 12, "limits.action.conversion_factor_min: NaN"},
		{"diameter", "chamber:\n  backscatter: 40\n", 11, "chamber.backscatter: 40"},
		{"site control", "engineer: \"Dr\\u202eevil\"\n", 10, `"Dr\u202eevil" holds the control character U+202E`},
		{"bell", "room: \"R\\a2\"\n", 10, `"R\a2" holds the control character U+0007`},
	} {
		t.Run(c.name, func(t *testing.T) {
			text := goodBench + c.extra
			if c.name == "site control" || c.name == "bell" {
				// Replace the earlier key rather than repeat it.
				text = strings.Replace(goodBench, "room: Room 2\n", "", 1) + c.extra
			}
			_, err := Parse("room2.yaml", []byte(text))
			if err == nil {
				t.Fatal("accepted")
			}
			var fe *filepos.Error
			if !errors.As(err, &fe) {
				t.Fatalf("no position in %q", err)
			}
			if fe.File != "room2.yaml" || fe.Line != c.line-boolInt(c.name == "site control" || c.name == "bell") {
				t.Errorf("at %s:%d, want line %d: %v", fe.File, fe.Line, c.line, err)
			}
			if !strings.Contains(err.Error(), c.want) {
				t.Errorf("error %q lacks %q", err, c.want)
			}
		})
	}
	if _, err := Parse("room2.yaml", []byte(goodBench)); err != nil {
		t.Fatalf("the good bench: %v", err)
	}
}

func boolInt(b bool) int {
	if b {
		return 1
	}
	return 0
}

// A file larger than MaxFileSize is refused before it is decoded (a 50 MB
// string used to need 1.5 GB).
func TestBenchFileSizeBound(t *testing.T) {
	big := goodBench + "site: \"" + strings.Repeat("x", MaxFileSize) + "\"\n"
	_, err := Parse("big.yaml", []byte(big))
	if err == nil || !strings.Contains(err.Error(), "big.yaml: larger than") {
		t.Fatalf("err %v", err)
	}
}

// A kerma ceiling above the default is accepted only up to
// MaxKermaCeiling, and said aloud at the start of each session.
func TestCeilingAboveDefaultIsSpoken(t *testing.T) {
	b, err := Parse("room2.yaml", []byte(goodBench+"limits:\n  kerma_ceiling_ugy_s: 80\n"))
	if err != nil {
		t.Fatal(err)
	}
	w := b.Warnings()
	if len(w) != 1 || !strings.Contains(w[0], "80 micrograys per second, above the default of 50") {
		t.Errorf("warnings %q", w)
	}
	b, _ = Parse("room2.yaml", []byte(goodBench+"limits:\n  kerma_ceiling_ugy_s: 50\n"))
	if w := b.Warnings(); len(w) != 0 {
		t.Errorf("warnings at the default: %q", w)
	}
}
