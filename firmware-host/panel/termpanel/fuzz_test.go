package termpanel

import (
	"math"
	"strings"
	"testing"

	"kermalux/procedures/panel"
)

// FuzzParseValue: whatever is typed, a value is either refused with a
// message or accepted inside the prompt's range (never NaN or infinite).
func FuzzParseValue(f *testing.F) {
	for _, s := range []string{"", "21.5", "21,5", "-0", "1e400", "NaN", "inf", "0x1p4", "١٢", "  7 ", "1_000"} {
		f.Add(s)
	}
	v := &panel.ValueRequest{Name: "temperature", Unit: "°C", Default: 21.5, HasDefault: true, Min: 10, Max: 40}
	f.Fuzz(func(t *testing.T, s string) {
		x, msg := (&Panel{}).parseValue(strings.TrimSpace(s), v)
		if msg != "" {
			return
		}
		if math.IsNaN(x) || math.IsInf(x, 0) || x < v.Min || x > v.Max {
			t.Fatalf("accepted %q as %g, outside %g..%g", s, x, v.Min, v.Max)
		}
	})
}
