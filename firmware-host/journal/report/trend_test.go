package report

import (
	"context"
	"math"
	"strings"
	"testing"
	"time"

	"kermalux/procedures/entry"
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
			if !tr.Fitted || len(tr.Projections) != 1 || !tr.Projections[0].HasCrossing {
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
			if d := tr.Projections[0].Crossing.Sub(want); d < -time.Minute || d > time.Minute {
				t.Errorf("crossing %s, want %s (off by %s)", tr.Projections[0].Crossing, want, d)
			}
			if len(tr.Points) != 7 || math.Abs(tr.Points[6].Fraction-(180-27)/b) > 1e-12 {
				t.Errorf("points: %d, last fraction %.6f", len(tr.Points), tr.Points[len(tr.Points)-1].Fraction)
			}
		})
	}
}

// TestTrendWithoutLimitsSaysSo: a history whose results carry no limits
// and no --action-level is not projected to an invented 50 %.
func TestTrendWithoutLimitsSaysSo(t *testing.T) {
	ts := Fit("HV-2291", "conversion_factor", sampleHistory(5, 170, -3))
	if len(ts) != 1 || len(ts[0].Projections) != 0 || !strings.Contains(ts[0].Note, "no limit recorded") {
		t.Fatalf("trend without limits: %+v", ts)
	}
}

func TestTrendWithoutCrossing(t *testing.T) {
	rising := Fit("HV-2291", "conversion_factor", sampleHistory(5, 150, +2), 0.5)
	if len(rising) != 1 || rising[0].Projections[0].HasCrossing || !strings.Contains(rising[0].Projections[0].Note, "not moving toward") {
		t.Errorf("rising trend: %+v", rising)
	}
	one := Fit("HV-2291", "conversion_factor", sampleHistory(1, 150, 0), 0.5)
	if len(one) != 1 || one[0].Fitted || one[0].Projections[0].HasCrossing {
		t.Errorf("single session: %+v", one)
	}
	// Already below the action level: 100 − 30 t reaches 50 at t = 1.67,
	// so the latest (t = 3, value 10) is past it.
	past := Fit("HV-2291", "conversion_factor", sampleHistory(4, 100, -30), 0.5)
	if len(past) != 1 || past[0].Projections[0].HasCrossing || !strings.Contains(past[0].Projections[0].Note, "already past") {
		t.Errorf("past the level: %+v", past)
	}
	if got := Fit("HV-2291", "contrast_ratio", sampleHistory(3, 100, -1), 0.5); len(got) != 0 {
		t.Errorf("no contrast ratio results, got %d trends", len(got))
	}
}

// Norris is the NIST Statistical Reference Dataset for linear regression
// "Norris" (lower difficulty, 36 observations), with its certified values
// (https://www.itl.nist.gov/div898/strd/lls/data/Norris.shtml): the
// outside reference for the fit and its uncertainties.
var norrisX = []float64{0.2, 337.4, 118.2, 884.6, 10.1, 226.5, 666.3, 996.3, 448.6, 777.0, 558.2, 0.4, 0.6, 775.5, 666.9, 338.0, 447.5, 11.6,
	556.0, 228.1, 995.8, 887.6, 120.2, 0.3, 0.3, 556.8, 339.1, 887.2, 999.0, 779.0, 11.1, 118.3, 229.2, 669.1, 448.9, 0.5}
var norrisY = []float64{0.1, 338.8, 118.1, 888.0, 9.2, 228.1, 668.5, 998.5, 449.1, 778.9, 559.2, 0.3, 0.1, 778.1, 668.8, 339.3, 448.9, 10.8,
	557.7, 228.3, 998.0, 888.8, 119.6, 0.3, 0.6, 557.6, 339.3, 888.0, 998.5, 778.9, 10.2, 117.6, 228.9, 668.4, 449.2, 0.2}

func TestFitLineAgainstNISTNorris(t *testing.T) {
	f, err := FitLine(norrisX, norrisY)
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name      string
		got, want float64
	}{
		{"intercept B0", f.Alpha, -0.262323073774029},
		{"slope B1", f.Beta, 1.00211681802045},
		{"SD of B1", f.SlopeSE(), 0.429796848199937e-03},
		// The standard error of the line at x = 0 is the SD of B0.
		{"SD of B0 (line at x = 0)", f.SE(0), 0.232818234301152},
		{"residual SD", f.ResidualSD, 0.884796396144373},
	} {
		if math.Abs(c.got-c.want) > 1e-9*math.Abs(c.want) {
			t.Errorf("%s = %.15g, certified %.15g", c.name, c.got, c.want)
		}
	}
	if f.DoF != 34 {
		t.Errorf("degrees of freedom %d, want 34 (certified ANOVA table)", f.DoF)
	}
	// Student's t, two-sided 95 %, 34 degrees of freedom: 2.032 in
	// published tables (NIST/SEMATECH e-Handbook 1.3.6.7.2).
	if math.Abs(f.T-2.032) > 0.0005 {
		t.Errorf("t(0.975, 34) = %.4f, tables give 2.032", f.T)
	}
}

// TestStudentTQuantiles checks the band's quantile against published
// tables (NIST/SEMATECH e-Handbook 1.3.6.7.2, two-sided 95 %).
func TestStudentTQuantiles(t *testing.T) {
	for _, c := range []struct {
		n    int // points; degrees of freedom n − 2
		want float64
	}{{3, 12.706}, {4, 4.303}, {7, 2.571}, {12, 2.228}} {
		xs := make([]float64, c.n)
		ys := make([]float64, c.n)
		for i := range xs {
			xs[i], ys[i] = float64(i), float64(i%2)
		}
		f, err := FitLine(xs, ys)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(f.T-c.want) > 0.0005 {
			t.Errorf("%d degrees of freedom: t = %.4f, tables give %.3f", c.n-2, f.T, c.want)
		}
	}
}

// TestTrendProjectsToEveryRecordedLimit: the latest result carries the
// bench's specification, action level and baseline rule as absolute
// values; the trend projects to each, with a band around each date.
func TestTrendProjectsToEveryRecordedLimit(t *testing.T) {
	hs := sampleHistory(6, 180, -6)
	// Scatter about the line (invented), so the band has a width.
	for i, d := range []float64{1.5, -2, 0.5, 2.5, -1.5, -1} {
		hs[i].Result.Value += d
		hs[i].Result.Baseline = 180
	}
	last := &hs[len(hs)-1].Result
	last.Limits = []entry.LimitCheck{
		{Kind: "specification", Bound: "at_least", Value: 120},
		{Kind: "baseline", Bound: "at_least", Fraction: 0.8, Value: 144},
		{Kind: "action level", Bound: "at_least", Value: 100},
	}
	ts := Fit("HV-2291", "conversion_factor", hs)
	if len(ts) != 1 || len(ts[0].Projections) != 3 {
		t.Fatalf("trends %+v", ts)
	}
	tr := ts[0]
	for _, pr := range tr.Projections {
		if !pr.HasCrossing || !pr.HasEarly || !pr.HasLate {
			t.Fatalf("%s: crossing %v, band %v %v (%s)", pr.Kind, pr.HasCrossing, pr.HasEarly, pr.HasLate, pr.Note)
		}
		if !pr.Early.Before(pr.Crossing) || !pr.Crossing.Before(pr.Late) {
			t.Errorf("%s: band %s .. %s does not hold the crossing %s", pr.Kind, Day(pr.Early), Day(pr.Late), Day(pr.Crossing))
		}
		// At the band's ends, the band's edge is at the limit.
		for _, end := range []time.Time{pr.Early, pr.Late} {
			x := years(end.Sub(tr.Origin))
			if gap := math.Abs(tr.Line.At(x)-pr.Value) - tr.Line.T*tr.Line.SE(x); math.Abs(gap) > 1e-3 {
				t.Errorf("%s: at %s the band edge misses the limit by %.4g", pr.Kind, Day(end), gap)
			}
		}
	}
	// The line crosses 144 first, then 120, then 100.
	if !tr.Projections[1].Crossing.Before(tr.Projections[0].Crossing) || !tr.Projections[0].Crossing.Before(tr.Projections[2].Crossing) {
		t.Errorf("order of crossings: %v", tr.Projections)
	}
	text := trendSentence(tr)
	for _, want := range []string{"Specification minimum 120", "Baseline rule minimum 80.0 % of baseline = 144", "Action level minimum 100", "95 % band", "standard uncertainty"} {
		if !strings.Contains(text, want) {
			t.Errorf("trend text lacks %q:\n%s", want, text)
		}
	}
	if strings.Contains(text, Day(tr.Projections[0].Crossing)) {
		t.Errorf("trend text gives the date to the day: %s", text)
	}
}

// TestTrendSimulatedSessionsShownNotFitted: a demo session of the same
// serial is marked and left out of the line.
func TestTrendSimulatedSessionsShownNotFitted(t *testing.T) {
	hs := sampleHistory(4, 180, -4.5)
	sim := hs[3]
	sim.Session, sim.Simulated = "demo-1", true
	sim.Result.Value = 40 // far off the line: it would bend the fit
	hs = append(hs, sim)
	ts := Fit("HV-2291", "conversion_factor", hs, 0.5)
	if len(ts) != 1 || ts[0].FitPoints != 4 || math.Abs(ts[0].Slope-(-4.5)) > 1e-9 {
		t.Fatalf("fit through the simulated session: %+v", ts)
	}
	var b strings.Builder
	if err := WriteTrendText(&b, ts); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(b.String(), "SIMULATED") {
		t.Errorf("trend text does not mark the simulated session:\n%s", b.String())
	}
	b.Reset()
	if err := WriteTrendCSV(&b, ts); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(b.String(), ",simulated\n") || !strings.Contains(b.String(), "demo-1") || !strings.HasSuffix(strings.TrimSpace(b.String()), ",true") {
		t.Errorf("trend CSV does not mark the simulated session:\n%s", b.String())
	}
	b.Reset()
	if err := WriteTrendJSON(&b, ts); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(b.String(), `"simulated": true`) {
		t.Errorf("trend JSON does not mark the simulated session")
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

// A year whose figure could not be measured (verdict not_measurable, value
// recorded as 0) is not a point of the trend: the fit of the other years
// is the same as without it. Before, the zero entered the fit and dragged
// the projected crossing years earlier.
func TestTrendLeavesOutNotMeasurable(t *testing.T) {
	hs := sampleHistory(7, 180, -4.5)
	want := Fit("HV-2291", "conversion_factor", hs, 0.5)[0]
	nm := hs[3]
	nm.Session = "hv2291-nm"
	nm.Date = nm.Date.Add(24 * time.Hour)
	nm.Result.Value, nm.Result.ExpUnc, nm.Result.Verdict = 0, 0, "not_measurable"
	got := Fit("HV-2291", "conversion_factor", append(hs, nm), 0.5)[0]
	if len(got.Points) != len(want.Points) {
		t.Fatalf("%d points, want %d: the not-measurable year is plotted", len(got.Points), len(want.Points))
	}
	if !got.Fitted || !got.Projections[0].Crossing.Equal(want.Projections[0].Crossing) {
		t.Errorf("crossing on %v, without the unmeasured year %v", got.Projections[0].Crossing, want.Projections[0].Crossing)
	}
}

// Sessions close together give no rate of change a year: three
// conversion factors minutes apart (the demo's runs) once gave "+318231 a
// year" from a 0.2 difference; a repeat check ten days after a repair
// likewise. At 90 days and more the line is fitted (common practice, not
// from a standard).
func TestTrendTooShortForARate(t *testing.T) {
	for _, tt := range []struct {
		name    string
		apart   time.Duration
		fitted  bool
		spanned string
	}{
		{"minutes apart", 3 * time.Minute, false, "6 minutes"},
		{"ten days apart", 10 * 24 * time.Hour, false, "20 days"},
		{"fifty days apart", 50 * 24 * time.Hour, true, ""},
	} {
		hs := sampleHistory(3, 150, 0)
		for i := range hs {
			hs[i].Date = hs[0].Date.Add(time.Duration(i) * tt.apart)
			hs[i].Result.Value = 150 + 0.1*float64(i%2)
		}
		ts := Fit("HV-2291", "conversion_factor", hs, 0.5)
		if len(ts) != 1 || ts[0].Fitted != tt.fitted {
			t.Fatalf("%s: fitted %v, want %v (%+v)", tt.name, len(ts) == 1 && ts[0].Fitted, tt.fitted, ts)
		}
		if !tt.fitted && !strings.Contains(ts[0].Note, "the sessions span "+tt.spanned+", too short for a rate of change") {
			t.Errorf("%s: note %q", tt.name, ts[0].Note)
		}
		if s := trendSentence(ts[0]); !tt.fitted && strings.Contains(s, "Rate of change") {
			t.Errorf("%s: the sentence still gives a rate: %s", tt.name, s)
		}
	}
}
