package roomair_test

import (
	"context"
	"errors"
	"math"
	"testing"
	"time"

	"periph.io/x/conn/v3/i2c"
	"periph.io/x/conn/v3/i2c/i2ctest"

	"kermalux/drivers"
	"kermalux/drivers/clock"
	"kermalux/drivers/roomair"
	"kermalux/drivers/roomair/airsim"
)

// The BMP280 data sheet's worked example (BST-BMP280-DS001 section 3.12;
// values from memory, see compensate_test.go): trimming parameters,
// adc_T = 519888 and adc_P = 415148 give 25.08 °C and 100653.27 Pa.
var exampleCal = airsim.ExampleCalibration

// script is the traffic a BME280 at 0x76 sees from Open and one Sense,
// holding the example's raw values in its data registers.
func script() []i2ctest.IO {
	tp, h := exampleCal.Bytes()
	var adcT, adcP, adcH int32 = 519888, 415148, 0x6000
	data := []byte{byte(adcP >> 12), byte(adcP >> 4), byte(adcP << 4), byte(adcT >> 12), byte(adcT >> 4), byte(adcT << 4), byte(adcH >> 8), byte(adcH)}
	return []i2ctest.IO{
		{Addr: 0x76, W: []byte{0xD0}, R: []byte{0x60}}, // chip id: BME280
		{Addr: 0x76, W: []byte{0x88}, R: tp},           // dig_T1..dig_H1
		{Addr: 0x76, W: []byte{0xE1}, R: h},            // dig_H2..dig_H6
		{Addr: 0x76, W: []byte{0xF2, 0x01}},            // ctrl_hum: osrs_h ×1
		{Addr: 0x76, W: []byte{0xF5, 0x00}},            // config: filter off
		{Addr: 0x76, W: []byte{0xF4, 0x24}},            // ctrl_meas: osrs_t ×1, osrs_p ×1, sleep
		{Addr: 0x76, W: []byte{0xF4, 0x25}},            // forced conversion
		{Addr: 0x76, W: []byte{0xF3}, R: []byte{0x00}}, // status: done
		{Addr: 0x76, W: []byte{0xF7}, R: data},         // burst read 0xF7..0xFE
	}
}

func TestSensePlayback(t *testing.T) {
	bus := &i2ctest.Playback{Ops: script(), DontPanic: true}
	clk := clock.NewManual(time.Date(2026, 12, 2, 9, 0, 0, 0, time.UTC))
	s, err := roomair.Open(&i2c.Dev{Bus: bus, Addr: roomair.AddrLow}, clk, "room_air")
	if err != nil {
		t.Fatal(err)
	}
	if s.Chip() != roomair.ChipBME280 {
		t.Errorf("chip 0x%02X, want BME280", s.Chip())
	}
	a, err := s.Sense(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(a.TemperatureC-25.08) > 0.005 || math.Abs(a.PressureKPa-100.65327) > 0.00002 {
		t.Errorf("%.4f °C %.6f kPa, data sheet example 25.08 °C 100.65327 kPa", a.TemperatureC, a.PressureKPa)
	}
	if !a.HasHumidity || a.HumidityPct <= 0 || a.HumidityPct >= 100 {
		t.Errorf("humidity %v %.2f %%", a.HasHumidity, a.HumidityPct)
	}
	// Forced conversion takes at most 9.3 ms at ×1 (data sheet section 9.1): the driver waits on the clock.
	if a.Mono < 9*time.Millisecond {
		t.Errorf("sampled at %v: the conversion time was not waited", a.Mono)
	}
	if err := bus.Close(); err != nil {
		t.Errorf("the driver did not make every expected transaction: %v", err)
	}
	// Uncertainty from the stated accuracy, rectangular (JCGM 100:2008 4.3.7): ±1 °C, ±1 hPa.
	if math.Abs(a.TemperatureUnc-1/math.Sqrt(3)) > 1e-12 || math.Abs(a.PressureUnc-0.1/math.Sqrt(3)) > 1e-12 {
		t.Errorf("uncertainties %g °C %g kPa", a.TemperatureUnc, a.PressureUnc)
	}
}

// The simulated chip answers the driver exactly as the recorded script
// expects, and returns the air it holds.
func TestSimulatedChipTraffic(t *testing.T) {
	chip := airsim.New(airsim.Air{TemperatureC: 25.0825, PressureKPa: 100.65326, HumidityPct: 50})
	rec := &i2ctest.Record{Bus: chip}
	clk := clock.NewManual(time.Time{})
	s, err := roomair.Open(&i2c.Dev{Bus: rec, Addr: roomair.AddrLow}, clk, "")
	if err != nil {
		t.Fatal(err)
	}
	if _, err := s.Sense(context.Background()); err != nil {
		t.Fatal(err)
	}
	want := script()
	if len(rec.Ops) != len(want) {
		t.Fatalf("%d transactions, want %d", len(rec.Ops), len(want))
	}
	for i, op := range rec.Ops {
		if string(op.W) != string(want[i].W) || len(op.R) != len(want[i].R) {
			t.Errorf("transaction %d: wrote %X read %d bytes, want %X and %d", i, op.W, len(op.R), want[i].W, len(want[i].R))
		}
		if i < 3 && string(op.R) != string(want[i].R) {
			t.Errorf("transaction %d: read %X, want %X", i, op.R, want[i].R)
		}
	}
	// The example air inverts back to the example's raw temperature and pressure.
	if got := rec.Ops[8].R[:6]; string(got) != string(want[8].R[:6]) {
		t.Errorf("data registers %X, the data sheet example's raw values are %X", got, want[8].R[:6])
	}
}

func TestSimulatedAirRoundTrip(t *testing.T) {
	chip := airsim.New(airsim.Air{})
	s, err := roomair.Open(&i2c.Dev{Bus: chip, Addr: roomair.AddrLow}, clock.NewManual(time.Time{}), "")
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []airsim.Air{
		{TemperatureC: 18, PressureKPa: 95.2, HumidityPct: 30},
		{TemperatureC: 21.37, PressureKPa: 101.325, HumidityPct: 45},
		{TemperatureC: 29.9, PressureKPa: 104.8, HumidityPct: 70},
		{TemperatureC: 5, PressureKPa: 70, HumidityPct: 10},
	} {
		chip.Set(want)
		a, err := s.Sense(context.Background())
		if err != nil {
			t.Fatal(err)
		}
		// Resolution at 20 bits: about 0.0003 °C and 0.2 Pa per count (common practice to
		// allow one count and t_fine's truncation); humidity 16 bits.
		if math.Abs(a.TemperatureC-want.TemperatureC) > 0.002 || math.Abs(a.PressureKPa-want.PressureKPa) > 0.0005 || math.Abs(a.HumidityPct-want.HumidityPct) > 0.05 {
			t.Errorf("set %+v, read %.4f °C %.5f kPa %.3f %%", want, a.TemperatureC, a.PressureKPa, a.HumidityPct)
		}
	}
}

func TestOpenAndSenseErrors(t *testing.T) {
	ctx := context.Background()
	clk := clock.NewManual(time.Time{})
	// Another chip at the address (0x61: a BME680's id).
	bad := &i2ctest.Playback{Ops: []i2ctest.IO{{Addr: 0x76, W: []byte{0xD0}, R: []byte{0x61}}}, DontPanic: true}
	if _, err := roomair.Open(&i2c.Dev{Bus: bad, Addr: 0x76}, clk, "room_air"); !errors.Is(err, roomair.ErrNoSensor) {
		t.Errorf("wrong chip id: %v, want ErrNoSensor", err)
	}
	// Nothing on the bus: the bus error is kept in the chain.
	gone := errors.New("i2c: no acknowledge")
	chip := airsim.New(airsim.Air{TemperatureC: 20, PressureKPa: 100})
	chip.Fail = gone
	if _, err := roomair.Open(&i2c.Dev{Bus: chip, Addr: 0x76}, clk, "room_air"); !errors.Is(err, gone) {
		t.Errorf("bus failure: %v", err)
	}
	// Blank trimming memory.
	blank := airsim.New(airsim.Air{TemperatureC: 20, PressureKPa: 100})
	blank.Cal = roomair.Calibration{}
	if _, err := roomair.Open(&i2c.Dev{Bus: blank, Addr: 0x76}, clk, "room_air"); err == nil {
		t.Error("blank calibration accepted")
	}
	// A conversion that never ends: timeout, not a hang.
	stuck := airsim.New(airsim.Air{TemperatureC: 20, PressureKPa: 100})
	stuck.BusyReads = 1 << 30
	s, err := roomair.Open(&i2c.Dev{Bus: stuck, Addr: 0x76}, clk, "room_air")
	if err != nil {
		t.Fatal(err)
	}
	if _, err := s.Sense(ctx); !errors.Is(err, drivers.ErrTimeout) {
		t.Errorf("stuck conversion: %v, want ErrTimeout", err)
	}
	// A conversion that is still running at first is waited for.
	slow := airsim.New(airsim.Air{TemperatureC: 20, PressureKPa: 100})
	slow.BusyReads = 3
	s, _ = roomair.Open(&i2c.Dev{Bus: slow, Addr: 0x76}, clk, "room_air")
	if a, err := s.Sense(ctx); err != nil || math.Abs(a.TemperatureC-20) > 0.002 {
		t.Errorf("slow conversion: %+v %v", a, err)
	}
	// A pulled sensor between samples.
	slow.Fail = gone
	if _, err := s.Sense(ctx); !errors.Is(err, gone) {
		t.Errorf("pulled sensor: %v", err)
	}
	// A BMP280 has no humidity: 6 data bytes, no 0xE1 block.
	bmp := airsim.New(airsim.Air{TemperatureC: 22, PressureKPa: 99})
	bmp.ID = roomair.ChipBMP280
	rec := &i2ctest.Record{Bus: bmp}
	s, err = roomair.Open(&i2c.Dev{Bus: rec, Addr: 0x76}, clk, "room_air")
	if err != nil {
		t.Fatal(err)
	}
	a, err := s.Sense(ctx)
	if err != nil || a.HasHumidity || math.Abs(a.PressureKPa-99) > 0.0005 {
		t.Errorf("BMP280: %+v %v", a, err)
	}
	if last := rec.Ops[len(rec.Ops)-1]; len(last.R) != 6 {
		t.Errorf("BMP280 data burst of %d bytes, want 6", len(last.R))
	}
}
