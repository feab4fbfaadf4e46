package engine

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"
)

// steady on signals whose answer is known by construction: a constant
// (including a meter under range reading exactly zero), noise around zero
// (a dark reading), a ramp, and an overshoot's turning point.
func TestSteadyKnownSignals(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	series := func(f func(s float64) float64) []timedValue {
		var xs []timedValue
		for i := 0; i <= 50; i++ { // 50 readings a second for 1 s
			d := time.Duration(i) * 20 * time.Millisecond
			xs = append(xs, timedValue{d, f(d.Seconds())})
		}
		return xs
	}
	tests := []struct {
		name string
		xs   []timedValue
		want bool
	}{
		{"zeros (under range)", series(func(float64) float64 { return 0 }), true},
		{"constant", series(func(float64) float64 { return 0.45 }), true},
		{"noise around zero", series(func(float64) float64 { return 0.001 * rng.NormFloat64() }), true},
		{"ramp 10 %/s", series(func(s float64) float64 { return 1 + 0.1*s }), false},
		// e^(-(s-0.5)²·40): rises to a peak at the window's middle and falls.
		{"turning point", series(func(s float64) float64 { return 1 + 0.2*math.Exp(-40*(s-0.5)*(s-0.5)) }), false},
	}
	for _, tc := range tests {
		if got := steady(tc.xs, time.Second, 0.02, 5); got != tc.want {
			t.Errorf("%s: steady = %v, want %v", tc.name, got, tc.want)
		}
	}
}
