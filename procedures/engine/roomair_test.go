package engine

import (
	"context"
	"errors"
	"math"
	"strings"
	"testing"

	"periph.io/x/conn/v3/i2c"

	"kermalux/drivers/clock"
	"kermalux/drivers/roomair"
	"kermalux/drivers/roomair/airsim"
	"kermalux/procedures/entry"
	"kermalux/procedures/panel"
)

// sensorSteps is cfSteps with the room's temperature and pressure asked of
// the sensor, as the built-in air-density procedure does.
func sensorSteps() []Step {
	steps := cfSteps()
	for _, s := range steps {
		if s.Kind == Enter {
			s.Value.Source = "sensor"
		}
	}
	return steps
}

// ventedRig is calibRig with a vented chamber whose certificate states the
// reference conditions T0 = 20 °C, P0 = 101.325 kPa (IAEA TRS-398's
// reference pressure; the temperature is the certificate's).
func ventedRig(t *testing.T, steps []Step) *rig {
	t.Helper()
	r, _ := calibRig(steps, "LM9-5521")
	dc := r.cfg.Correctors[Dosimeter].(CalibCorrector)
	dc.Cert.Vented, dc.Cert.RefTemperature, dc.Cert.RefPressure = true, 20, 101.325
	dc.TemperatureUnc, dc.PressureUnc = 0.5/math.Sqrt(3), 0.2/math.Sqrt(3) // the bench's thermometer and barometer
	r.cfg.Correctors[Dosimeter] = dc
	return r
}

func openSim(t *testing.T, clk clock.Clock, air airsim.Air) (*airsim.Chip, *roomair.Sensor) {
	t.Helper()
	chip := airsim.New(air)
	s, err := roomair.Open(&i2c.Dev{Bus: chip, Addr: chip.Addr}, clk, RoomAir)
	if err != nil {
		t.Fatal(err)
	}
	return chip, s
}

// ktp is the air-density correction of a vented chamber,
// k_TP = ((273.15 + T)/(273.15 + T0))·(P0/P) (IAEA TRS-398 (2000), eq. for
// k_TP in section 4.4.3.1), written out here rather than taken from calib.
func ktp(t, p, t0, p0 float64) float64 { return (273.15 + t) / (273.15 + t0) * (p0 / p) }

// The sensor's air enters k_TP of every dosimeter reading, and its stated
// accuracy (±1 °C, ±1 hPa as rectangular half-widths, JCGM 100:2008 4.3.7)
// enters the result's budget in place of the bench thermometer's and
// barometer's; the operator is not asked.
func TestRoomAirSensorEntersKTP(t *testing.T) {
	cases := []struct {
		name string
		air  airsim.Air
	}{
		{"warm low pressure", airsim.Air{TemperatureC: 26.4, PressureKPa: 96.85, HumidityPct: 40}},
		{"cool high pressure", airsim.Air{TemperatureC: 18.2, PressureKPa: 102.4, HumidityPct: 55}},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			r := ventedRig(t, sensorSteps())
			_, s := openSim(t, r.clk, tc.air)
			r.cfg.RoomAir = s
			if _, err := r.run(context.Background()); err != nil {
				t.Fatalf("run: %v\n%s", err, r.pan.Dialogue())
			}
			if strings.Contains(r.pan.Dialogue(), "Room temperature, in degrees") {
				t.Errorf("the operator was asked for the temperature although the sensor read it:\n%s", r.pan.Dialogue())
			}
			vals := map[string]entry.Value{}
			for _, v := range records[entry.Value](r.jr, "s1", entry.KindValue) {
				vals[v.Name] = v
			}
			temp, press := vals["temperature"], vals["pressure"]
			if temp.Source != "sensor" || press.Source != "sensor" || temp.Sensor != RoomAir || temp.Raw == "" {
				t.Fatalf("journalled values %+v %+v, want source sensor, sensor room_air, raw registers", temp, press)
			}
			// The simulated chip serves raw values within its resolution
			// (0.0003 °C, 0.2 Pa) of the air; the engine keeps 0.01 °C, 1 Pa.
			if math.Abs(temp.Value-tc.air.TemperatureC) > 0.005 || math.Abs(press.Value-tc.air.PressureKPa) > 0.0005 {
				t.Fatalf("sensor read %v °C, %v kPa, the room holds %v °C, %v kPa", temp.Value, press.Value, tc.air.TemperatureC, tc.air.PressureKPa)
			}
			uT, uP := 1/math.Sqrt(3), 0.1/math.Sqrt(3)
			if math.Abs(temp.StdUnc-uT) > 1e-12 || math.Abs(press.StdUnc-uP) > 1e-12 {
				t.Errorf("journalled uncertainties %v °C, %v kPa, want %v, %v", temp.StdUnc, press.StdUnc, uT, uP)
			}
			want := ktp(tc.air.TemperatureC, tc.air.PressureKPa, 20, 101.325)
			n := 0
			for _, rd := range records[entry.Reading](r.jr, "s1", entry.KindReading) {
				if rd.Meter == "" || rd.StepID != "cf@32cm" || !strings.Contains(rd.Quantity, "kerma") {
					continue
				}
				for _, c := range rd.Corrections {
					if c.Name == "k_tp" {
						n++
						if math.Abs(c.Factor-want) > 1e-9 {
							t.Fatalf("k_TP %v, want %v from %v °C, %v kPa", c.Factor, want, tc.air.TemperatureC, tc.air.PressureKPa)
						}
					}
				}
			}
			if n == 0 {
				t.Fatal("no dosimeter reading carries k_TP")
			}
			var rows []entry.BudgetRow
			for _, res := range records[entry.Result](r.jr, "s1", entry.KindResult) {
				if res.Quantity == "conversion_factor" {
					rows = res.Budget
				}
			}
			got := map[string]float64{}
			for _, b := range rows {
				got[b.Source] = b.RelStdUnc
			}
			wantRows := map[string]float64{"room temperature (k_TP)": uT / (273.15 + tc.air.TemperatureC), "air pressure (k_TP)": uP / tc.air.PressureKPa}
			for src, w := range wantRows {
				if g, ok := got[src]; !ok || math.Abs(g-w) > 1e-4*w {
					t.Errorf("budget row %q: %v, want %v (the sensor's u); rows %v", src, g, w, got)
				}
			}
		})
	}
}

// A sensor that fails (pulled off the bus) leaves the values to be
// entered: the operator's answers are used, with the bench instruments'
// uncertainties, and the journal says the sensor failed.
func TestRoomAirFallbackToEntered(t *testing.T) {
	r := ventedRig(t, sensorSteps())
	chip, s := openSim(t, r.clk, airsim.Air{TemperatureC: 26.4, PressureKPa: 96.85})
	chip.Fail = errors.New("i2c: no ACK from 0x76")
	r.cfg.RoomAir = s
	if _, err := r.run(context.Background()); err != nil {
		t.Fatalf("run: %v\n%s", err, r.pan.Dialogue())
	}
	if failed := airFailures(r, "no ACK"); failed != 2 {
		t.Errorf("%d room_air_failed events naming the bus error, want 2 (temperature, pressure)", failed)
	}
	for _, v := range records[entry.Value](r.jr, "s1", entry.KindValue) {
		if v.Source == "sensor" || v.StdUnc != 0 {
			t.Errorf("value %+v: want an entered value without the sensor's uncertainty", v)
		}
	}
	// The rig's bench defaults, accepted with a press: 22 °C, 101.3 kPa.
	want := ktp(22, 101.3, 20, 101.325)
	for _, rd := range records[entry.Reading](r.jr, "s1", entry.KindReading) {
		for _, c := range rd.Corrections {
			if c.Name == "k_tp" && math.Abs(c.Factor-want) > 1e-9 {
				t.Fatalf("k_TP %v, want %v from the entered 22 °C, 101.3 kPa", c.Factor, want)
			}
		}
	}
	var rows []entry.BudgetRow
	for _, res := range records[entry.Result](r.jr, "s1", entry.KindResult) {
		if res.Quantity == "conversion_factor" {
			rows = res.Budget
		}
	}
	for _, b := range rows {
		if b.Source == "room temperature (k_TP)" {
			if w := 0.5 / math.Sqrt(3) / (273.15 + 22); math.Abs(b.RelStdUnc-w) > 1e-4*w {
				t.Errorf("temperature row %v, want the bench thermometer's %v", b.RelStdUnc, w)
			}
			return
		}
	}
	t.Errorf("no temperature row in the budget %+v", rows)
}

// A session paused after the sensor read the air resumes with the air and
// its uncertainty from the journal, even with the sensor gone: the budget
// rows are still the sensor's (±1 °C rectangular, BST-BME280-DS002 rev. 1.6
// table 1, from memory), not the bench thermometer's.
func TestRoomAirResumedFromJournal(t *testing.T) {
	r := ventedRig(t, sensorSteps())
	_, s := openSim(t, r.clk, airsim.Air{TemperatureC: 26.4, PressureKPa: 96.85})
	r.cfg.RoomAir = s
	paused := false
	r.reply = func(p panel.Prompt) (panel.Response, bool) {
		if !paused && (p.Action == panel.ActBeamOn || p.Action == panel.ActMenu) {
			paused = p.Action == panel.ActMenu // the pause gesture, then again at the pause menu
			return panel.Response{Answer: panel.Pause, At: r.clk.Now()}, true
		}
		return panel.Response{}, false
	}
	sum, err := r.run(context.Background())
	if !errors.Is(err, ErrPaused) {
		t.Fatalf("first run: %v, want paused", err)
	}
	r.cfg.Resume, r.cfg.RoomAir = sum.Session, nil
	if _, err := r.run(context.Background()); err != nil {
		t.Fatalf("resume: %v\n%s", err, r.pan.Dialogue())
	}
	var row *entry.BudgetRow
	for _, res := range records[entry.Result](r.jr, sum.Session, entry.KindResult) {
		for i, b := range res.Budget {
			if res.Quantity == "conversion_factor" && b.Source == "room temperature (k_TP)" {
				row = &res.Budget[i]
			}
		}
	}
	if w := 1 / math.Sqrt(3) / (273.15 + 26.4); row == nil || math.Abs(row.RelStdUnc-w) > 1e-4*w {
		t.Fatalf("temperature row %+v after resume, want relative %v (the sensor's)", row, w)
	}
}

// A sensor reading outside the step's range (a chip in the sun, a failing
// one) is not used: it is journalled and the value is entered.
func TestRoomAirOutOfRangeEntered(t *testing.T) {
	r := ventedRig(t, sensorSteps())
	_, s := openSim(t, r.clk, airsim.Air{TemperatureC: 48, PressureKPa: 99}) // the step takes 10 to 40 °C
	r.cfg.RoomAir = s
	if _, err := r.run(context.Background()); err != nil {
		t.Fatalf("run: %v", err)
	}
	src := map[string]string{}
	for _, v := range records[entry.Value](r.jr, "s1", entry.KindValue) {
		src[v.Name] = v.Source
	}
	if src["temperature"] == "sensor" || src["pressure"] != "sensor" {
		t.Errorf("sources %v: want the temperature entered, the pressure from the sensor", src)
	}
	if n := airFailures(r, "48.0 °C is outside 10.0 to 40.0 °C"); n != 1 {
		t.Errorf("%d room_air_failed events for the out-of-range temperature, want 1", n)
	}
}

// airFailures counts the room_air_failed events whose detail holds detail.
func airFailures(r *rig, detail string) int {
	n := 0
	for _, ev := range records[entry.Event](r.jr, "s1", entry.KindEvent) {
		if ev.Name == evRoomAirFailed && strings.Contains(ev.Detail, detail) {
			n++
		}
	}
	return n
}
