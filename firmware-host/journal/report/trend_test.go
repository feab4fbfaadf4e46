package report

import (
	"context"
	"math"
	"strings"
	"testing"
	"time"
)

// TestTrendCrossingOnAStraightLine: yearly results falling exactly on
// G(t) = 180 − 4.5·t (t in years) must give the rate −4.5 a year and cross
// A·B at t = (A·B − 180)/(−4.5): arithmetic on the line.
func TestTrendCrossingOnAStraightLine(t *testing.T) {
	tests := []struct {
		name        string
		baseline    float64 // recorded baseline; 0: the first session's value
		actionLevel float64
		wantYears   float64
	}{
		// B = 180 (first session), A = 0.5: 90 = 180 − 4.5 t ⇒ t = 20.
		{"first session as baseline", 0, 0.5, 20},
		// B = 200 recorded, A = 0.6: 120 = 180 − 4.5 t ⇒ t = 13⅓.
		{"recorded baseline", 200, 0.6, 60.0 / 4.5},
		// Default action level (0.5) with B = 180: t = 20.
		{"default action level", 0, 0, 20},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			hs := sampleHistory(7, 180, -4.5)
			for i := range hs {
				hs[i].Result.Baseline = tt.baseline
			}
			ts := Fit("HV-2291", "conversion_factor", hs, tt.actionLevel)
			if len(ts) != 1 {
				t.Fatalf("%d trends, want 1", len(ts))
			}
			tr := ts[0]
			if !tr.Fitted || !tr.HasCrossing {
				t.Fatalf("no fit or no crossing: %+v", tr)
			}
			if math.Abs(tr.Slope-(-4.5)) > 1e-9 {
				t.Errorf("slope %.12g a year, want −4.5", tr.Slope)
			}
			b := tt.baseline
			if b == 0 {
				b = 180
			}
			if math.Abs(tr.FracPerYear-(-4.5/b)) > 1e-12 {
				t.Errorf("rate %.6g of baseline a year, want %.6g", tr.FracPerYear, -4.5/b)
			}
			if math.Abs(tr.Intercept-180) > 1e-9 {
				t.Errorf("intercept %.12g, want 180", tr.Intercept)
			}
			want := tr.Origin.Add(time.Duration(tt.wantYears * 365.25 * 24 * float64(time.Hour)))
			if d := tr.Crossing.Sub(want); d < -time.Minute || d > time.Minute {
				t.Errorf("crossing %s, want %s (off by %s)", tr.Crossing, want, d)
			}
			if len(tr.Points) != 7 || math.Abs(tr.Points[6].Fraction-(180-27)/b) > 1e-12 {
				t.Errorf("points: %d, last fraction %.6f", len(tr.Points), tr.Points[len(tr.Points)-1].Fraction)
			}
		})
	}
}

func TestTrendWithoutCrossing(t *testing.T) {
	rising := Fit("HV-2291", "conversion_factor", sampleHistory(5, 150, +2), 0.5)
	if len(rising) != 1 || rising[0].HasCrossing || !strings.Contains(rising[0].CrossingNote, "not moving toward") {
		t.Errorf("rising trend: %+v", rising)
	}
	one := Fit("HV-2291", "conversion_factor", sampleHistory(1, 150, 0), 0.5)
	if len(one) != 1 || one[0].Fitted || one[0].HasCrossing {
		t.Errorf("single session: %+v", one)
	}
	// Already below the action level: 100 − 30 t reaches 50 at t = 1.67,
	// so the latest (t = 3, value 10) is past it.
	past := Fit("HV-2291", "conversion_factor", sampleHistory(4, 100, -30), 0.5)
	if len(past) != 1 || past[0].HasCrossing || !strings.Contains(past[0].CrossingNote, "already past") {
		t.Errorf("past the level: %+v", past)
	}
	if got := Fit("HV-2291", "contrast_ratio", sampleHistory(3, 100, -1), 0.5); len(got) != 0 {
		t.Errorf("no contrast ratio results, got %d trends", len(got))
	}
}

type fakeHistory map[string][]HistoryPoint

func (f fakeHistory) History(ctx context.Context, serial string) ([]HistoryPoint, error) {
	if hs, ok := f[serial]; ok {
		return hs, nil
	}
	return nil, nil
}

func TestLoadTrends(t *testing.T) {
	src := fakeHistory{"HV-2291": sampleHistory(6, 170, -3)}
	ts, err := LoadTrends(context.Background(), src, "HV-2291", "conversion_factor", 0.5)
	if err != nil || len(ts) != 1 {
		t.Fatalf("LoadTrends: %v, %d", err, len(ts))
	}
	if _, err := LoadTrends(context.Background(), src, "XX-0000", "conversion_factor", 0.5); err == nil || !strings.Contains(err.Error(), "XX-0000") {
		t.Errorf("unknown serial: %v", err)
	}
	if _, err := LoadTrends(context.Background(), src, "HV-2291", "contrast_ratio", 0.5); err == nil {
		t.Errorf("no results of the quantity: no error")
	}
	var b strings.Builder
	if err := WriteTrendCSV(&b, ts); err != nil {
		t.Fatal(err)
	}
	if n := strings.Count(b.String(), "\n"); n != 7 {
		t.Errorf("trend CSV has %d lines, want header + 6", n)
	}
}
