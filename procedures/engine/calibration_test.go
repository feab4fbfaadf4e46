package engine

import (
	"context"
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
	"testing"
	"time"

	"kermalux/calib"
	"kermalux/drivers"
	"kermalux/drivers/units"
	"kermalux/firmware-host/panel/scripted"
	"kermalux/procedures/entry"
	"kermalux/procedures/panel"
)

// idMeter is a fake meter that identifies itself and, from changeAt on,
// reports that another meter is on its link (as a dialect does after a
// reconnect that brought up another serial).
type idMeter struct {
	*fakeMeter
	id       drivers.Identity
	changeAt time.Duration // 0: never
	floor    float64       // readings below it come back under range, with no value
	decimals int           // > 0: the meter prints this many decimals
}

func (m *idMeter) Identify(ctx context.Context) (drivers.Identity, error) { return m.id, nil }

func (m *idMeter) Read(ctx context.Context) (drivers.Reading, error) {
	if m.changeAt > 0 && m.p.clk.Mono() >= m.changeAt {
		m.p.clk.Advance(m.period)
		return drivers.Reading{}, fmt.Errorf("%s: reconnected: serial LM9-9999 where LM9-5521 was: %w", m.name, drivers.ErrMeterChanged)
	}
	r, err := m.fakeMeter.Read(ctx)
	if err == nil && m.decimals > 0 {
		p := math.Pow(10, float64(m.decimals))
		r.Value = math.Round(r.Value*p) / p
		r.RawValue, r.Raw = r.Value, strconv.FormatFloat(r.Value, 'f', m.decimals, 64)
	}
	if err == nil && m.floor > 0 && r.Value < m.floor {
		r.Status, r.Value, r.RawValue, r.Raw = drivers.StatusUnderRange, 0, 0, "UND"
	}
	return r, err
}

// testCerts are an invented photometer and dosimeter certificate (demo
// data), in date on the rig's day.
func testCerts() (phot, dos *calib.Certificate) {
	day := func(s string) time.Time { t, _ := time.Parse(time.DateOnly, s); return t }
	phot = &calib.Certificate{Number: "T-PH", Laboratory: "test", Model: "Vessoric LM-9", Serial: "LM9-5521", Quantity: units.Luminance,
		Calibrated: day("2026-01-10"), Due: day("2027-01-10"), Coefficient: 1.25, Expanded: 0.02, CoverageFactor: 2, Resolution: 0.001}
	dos = &calib.Certificate{Number: "T-DO", Laboratory: "test", Model: "Veltrane KR-40", Serial: "KR40-1187", Quantity: units.AirKermaRate,
		Calibrated: day("2026-01-10"), Due: day("2027-01-10"), Coefficient: 1.0, Expanded: 0.024, CoverageFactor: 2, Resolution: 0.001}
	return phot, dos
}

// calibRig is newRig with meters that identify themselves and
// certificate correctors; photSerial is what the photometer reports.
func calibRig(steps []Step, photSerial string) (*rig, *idMeter) {
	r := newRig(steps)
	pc, dc := testCerts()
	phot := &idMeter{fakeMeter: r.phot, id: drivers.Identity{Maker: "VESSORIC", Model: "LM-9", Serial: photSerial, Firmware: "1.4"}}
	dos := &idMeter{fakeMeter: r.dos, id: drivers.Identity{Maker: "VELTRANE", Model: "KR-40", Serial: "KR40-1187", Firmware: "2.0"}}
	r.cfg.Meters = map[string]drivers.Meter{Dosimeter: dos, Photometer: phot}
	r.cfg.Correctors = map[string]Corrector{Photometer: CalibCorrector{Cert: pc}, Dosimeter: CalibCorrector{Cert: dc}}
	return r, phot
}

// TestDarkSubtractedOnceInMeterScale (observation 6): the beam readings'
// dark is the photometer's own beam-off reading, so every corrected
// luminance is N·(M − M_dark) with M_dark the mean of the dark step's raw
// readings (the corrections' order of calib/doc.go; before, N·(M −
// N·M_dark)). The result's budget carries the dark's uncertainty.
func TestDarkSubtractedOnceInMeterScale(t *testing.T) {
	r, _ := calibRig(cfSteps(), "LM9-5521")
	if _, err := r.run(context.Background()); err != nil {
		t.Fatalf("run: %v\n%s", err, r.pan.Dialogue())
	}
	var dark calib.Running
	var beam []entry.Reading
	for _, rd := range records[entry.Reading](r.jr, "s1", entry.KindReading) {
		if rd.Quantity != string(units.Luminance) || !rd.Used {
			continue
		}
		switch rd.StepID {
		case "dark":
			dark.Add(rd.RawValue)
		case "cf@32cm":
			beam = append(beam, rd)
		}
	}
	if dark.Summary().N < 5 || len(beam) < 5 {
		t.Fatalf("%d dark and %d beam readings", dark.Summary().N, len(beam))
	}
	for _, rd := range beam {
		want := 1.25 * (rd.RawValue - dark.Summary().Mean)
		if math.Abs(rd.Value-want) > 1e-9*want {
			t.Fatalf("corrected %v from raw %v, want 1.25 × (raw − dark %v) = %v; corrections %+v", rd.Value, rd.RawValue, dark.Summary().Mean, want, rd.Corrections)
		}
		if !rd.Calibrated {
			t.Fatalf("reading not calibrated: %v", rd.Flags)
		}
	}
	res := records[entry.Result](r.jr, "s1", entry.KindResult)
	if len(res) == 0 {
		t.Fatal("no result")
	}
	var darkRow bool
	for _, b := range res[0].Budget {
		darkRow = darkRow || strings.Contains(b.Source, "dark")
	}
	if !darkRow {
		t.Errorf("conversion factor budget has no row for the dark: %+v", res[0].Budget)
	}
}

// TestIdentityBindsCertificate (observation 5): each meter is asked who it
// is at the start and the answer journalled; a photometer reporting
// another serial than its certificate's is said to be uncalibrated before
// the first exposure, and its results are not calibrated.
func TestIdentityBindsCertificate(t *testing.T) {
	for _, tc := range []struct {
		serial     string
		calibrated bool
	}{{"LM9-5521", true}, {"LM9-6007", false}} {
		r, _ := calibRig(cfSteps(), tc.serial)
		sum, err := r.run(context.Background())
		if err != nil {
			t.Fatalf("run: %v", err)
		}
		var ids []entry.MeterIdentity
		for _, ev := range records[entry.Event](r.jr, "s1", entry.KindEvent) {
			if ev.Name == evIdentified && ev.Meter != nil {
				ids = append(ids, *ev.Meter)
			}
		}
		if len(ids) != 2 || ids[1].Role != Photometer || ids[1].Serial != tc.serial || ids[1].Firmware != "1.4" || ids[1].Maker != "VESSORIC" || ids[1].CertificateApplies != tc.calibrated {
			t.Errorf("serial %s: identities journalled %+v", tc.serial, ids)
		}
		warned, beamAsked := -1, -1
		for i, e := range r.pan.Events() {
			if e.Kind == scripted.KindSay && e.Message.Level == panel.Warn && strings.Contains(e.Message.Text, "does not apply") && strings.Contains(e.Message.Text, tc.serial) && warned < 0 {
				warned = i
			}
			if e.Kind == scripted.KindAsk && e.Prompt.Action == panel.ActBeamOn && beamAsked < 0 {
				beamAsked = i
			}
		}
		if tc.calibrated != (warned < 0) || (!tc.calibrated && warned > beamAsked) {
			t.Errorf("serial %s: warning at event %d, first beam prompt at %d:\n%s", tc.serial, warned, beamAsked, r.pan.Dialogue())
		}
		if len(sum.Results) == 0 || sum.Results[0].Calibrated != tc.calibrated {
			t.Errorf("serial %s: results %+v", tc.serial, sum.Results)
		}
	}
}

// TestMeterChangedStopsStep (observation 5: another meter on the same link
// carried on under the first one's identity): when the photometer's
// dialect reports drivers.ErrMeterChanged during a beam reading, the
// engine has the beam released, says why and stops the step; nothing
// after it is measured.
func TestMeterChangedStopsStep(t *testing.T) {
	r, phot := calibRig(cfSteps(), "LM9-5521")
	r.reply = func(p panel.Prompt) (panel.Response, bool) {
		if p.Action == panel.ActBeamOn && phot.changeAt == 0 {
			phot.changeAt = r.clk.Mono() + 3*time.Second // during the exposure
		}
		return panel.Response{}, false
	}
	_, err := r.run(context.Background())
	if !errors.Is(err, drivers.ErrMeterChanged) {
		t.Fatalf("run error %v, want one wrapping drivers.ErrMeterChanged\n%s", err, r.pan.Dialogue())
	}
	if r.phys.beam {
		t.Errorf("the beam is still on after the stop\n%s", r.pan.Dialogue())
	}
	var released, told bool
	for _, m := range r.pan.Messages() {
		if m.Action == panel.ActBeamOff && strings.Contains(m.Text, "Release the beam") {
			released = true
		}
		if released && strings.Contains(m.Text, "not the one identified") {
			told = true
		}
	}
	if !released || !told {
		t.Errorf("released %v, reason said after %v:\n%s", released, told, r.pan.Dialogue())
	}
	if res := records[entry.Result](r.jr, "s1", entry.KindResult); len(res) != 0 {
		t.Errorf("results after the change: %+v", res)
	}
	var ev bool
	for _, e := range records[entry.Event](r.jr, "s1", entry.KindEvent) {
		ev = ev || e.Name == evMeterChanged
	}
	if !ev {
		t.Error("no meter_changed event journalled")
	}
}

// TestDarkUnderRangeFloor (observation 4: a photometer whose range floor is
// above the dark limit reported dark "0 ± 0, pass", the dark was never
// subtracted): the dark read under range is judged "not measurable"
// against a limit below the certificate's range floor, and the beam
// readings have half the floor subtracted (the middle of 0 to the floor,
// JCGM 100:2008 4.3.7) with that rectangular uncertainty, still calibrated.
func TestDarkUnderRangeFloor(t *testing.T) {
	steps := cfSteps()
	steps = append(steps,
		Step{ID: "dark-level", Kind: Compute, Compute: &ComputeSpec{Figure: "dark_level", Inputs: map[string]string{"reading": "dark"}}},
		Step{ID: "dark-check", Kind: Judge, Judge: &JudgeSpec{Result: "dark-level", Limits: []JudgeLimit{{Kind: "max", Value: 0.05}}}})
	r, phot := calibRig(steps, "LM9-5521")
	phot.floor = 0.1 // the rig's dark light is 0.05 cd/m²
	r.cfg.Correctors[Photometer].(CalibCorrector).Cert.RangeFloor = 0.1
	if _, err := r.run(context.Background()); err != nil {
		t.Fatalf("run: %v\n%s", err, r.pan.Dialogue())
	}
	var level *entry.Result
	for _, res := range records[entry.Result](r.jr, "s1", entry.KindResult) {
		if res.Quantity == "dark_level" {
			level = &res
		}
	}
	if level == nil || level.Verdict != string(calib.NotMeasurable) || !strings.Contains(level.DecidedBy, "range floor") {
		t.Fatalf("dark level result %+v, want not_measurable by the range floor", level)
	}
	for _, rd := range records[entry.Reading](r.jr, "s1", entry.KindReading) {
		if rd.StepID != "cf@32cm" || rd.Quantity != string(units.Luminance) || !rd.Used {
			continue
		}
		if len(rd.Corrections) == 0 || rd.Corrections[0].Name != "dark" || math.Abs(rd.Corrections[0].Offset+0.05) > 1e-12 || !rd.Calibrated {
			t.Fatalf("beam reading corrections %+v calibrated %v, want the dark taken as 0.05 (half the floor)", rd.Corrections, rd.Calibrated)
		}
	}
}

// TestDarkLevelPrintedResolution (observation 6: "0.0300031 ± 0.0000054
// cd/m²" from a meter that prints two decimals): with no resolution on the
// certificate, the step of the printed digits is the display's resolution
// and enters the dark level's U: at least 2 × 0.01/√12 (JCGM 100:2008
// F.2.2.1) times the coefficient 1.25.
func TestDarkLevelPrintedResolution(t *testing.T) {
	steps := cfSteps()
	steps = append(steps, Step{ID: "dark-level", Kind: Compute, Compute: &ComputeSpec{Figure: "dark_level", Inputs: map[string]string{"reading": "dark"}}})
	r, phot := calibRig(steps, "LM9-5521")
	phot.decimals = 2
	r.cfg.Correctors[Photometer].(CalibCorrector).Cert.Resolution = 0
	r.phys.darkL = 0.03
	if _, err := r.run(context.Background()); err != nil {
		t.Fatalf("run: %v", err)
	}
	for _, res := range records[entry.Result](r.jr, "s1", entry.KindResult) {
		if res.Quantity != "dark_level" {
			continue
		}
		if min := 2 * 0.01 / math.Sqrt(12) * 1.25 * 0.999; res.ExpUnc < min {
			t.Errorf("dark level %v ± %v, want U of at least %v from the printed resolution", res.Value, res.ExpUnc, min)
		}
		return
	}
	t.Fatal("no dark level result")
}
