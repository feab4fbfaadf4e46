// Package roomair reads the room's air temperature, pressure and relative
// humidity from a Bosch BMP280 (temperature, pressure) or BME280 (also
// humidity) on the board's I2C bus, so that the air-density correction
// k_TP of a vented ionisation chamber uses a measured room air instead of
// values read off a thermometer and a barometer and entered by hand.
//
// The driver is written over periph.io/x/conn/v3 (any conn.Conn: an
// *i2c.Dev on a real bus, a simulated chip, or i2ctest.Playback in
// tests). Each Sense triggers one forced-mode conversion, waits for it on
// the kermalux clock, burst-reads the data registers and applies the data
// sheet's compensation (compensate.go). Its uncertainty is the data sheet's
// stated absolute accuracy, taken as the half-width of a rectangular
// distribution (JCGM 100:2008, 4.3.7).
package roomair

import (
	"context"
	"errors"
	"fmt"
	"math"
	"time"

	"periph.io/x/conn/v3"

	"kermalux/drivers"
	"kermalux/drivers/clock"
	"kermalux/drivers/units"
)

// I2C addresses: 0x76 with SDO to ground, 0x77 with SDO to VDDIO
// (BME280 data sheet BST-BME280-DS002 rev. 1.6, section 6.2).
const (
	AddrLow  = 0x76
	AddrHigh = 0x77
)

// Chip ids read from register 0xD0.
const (
	ChipBMP280 = 0x58
	ChipBME280 = 0x60
)

// Registers (BST-BME280-DS002 rev. 1.6 section 5.3, table 18; the BMP280
// shares them except humidity).
const (
	regCalibTP  = 0x88 // 26 bytes to 0xA1
	regID       = 0xD0
	regReset    = 0xE0
	regCalibH   = 0xE1 // 7 bytes to 0xE7
	regCtrlHum  = 0xF2
	regStatus   = 0xF3
	regCtrlMeas = 0xF4
	regConfig   = 0xF5
	regData     = 0xF7 // press 0xF7..0xF9, temp 0xFA..0xFC, hum 0xFD..0xFE

	statusMeasuring = 0x08 // status bit 3: a conversion is running
	resetWord       = 0xB6
)

// Settings written at Open: oversampling ×1 for each quantity, IIR filter
// off, forced mode: the data sheet's "weather monitoring" use case
// (BST-BME280-DS002 rev. 1.6 section 3.5.1), suited to a room whose air
// changes over minutes. ctrl_meas = osrs_t 001, osrs_p 001, mode 01
// (forced); ctrl_hum = osrs_h 001; config = t_sb 000, filter 000.
const (
	ctrlHumX1    = 0x01
	ctrlMeasX1   = 0x01<<5 | 0x01<<2
	modeForced   = 0x01
	configNoIIR  = 0x00
	measureMax   = 10 * time.Millisecond // 1.25 + 2.3 + (2.3 + 0.575) + (2.3 + 0.575) = 9.3 ms at ×1 (section 9.1)
	pollInterval = 2 * time.Millisecond
	pollGiveUp   = 100 * time.Millisecond
)

// Stated accuracy, as half-widths of the data sheets' absolute accuracy
// over 0..65 °C (BME280: BST-BME280-DS002 rev. 1.6 tables 1 and 2, BMP280:
// BST-BMP280-DS001 table 1; values from memory of those tables): ±1 °C
// for temperature, ±1 hPa for pressure, ±3 %RH for humidity.
const (
	TemperatureAccuracyC = 1.0
	PressureAccuracyKPa  = 0.1
	HumidityAccuracyPct  = 3.0
)

// Standard uncertainties from the stated accuracies (rectangular: a/√3).
var (
	TemperatureUnc = TemperatureAccuracyC / math.Sqrt(3)
	PressureUnc    = PressureAccuracyKPa / math.Sqrt(3)
)

// ErrNoSensor: nothing on the bus answered as a BMP280 or BME280.
var ErrNoSensor = errors.New("no BMP280 or BME280 on the bus")

// Air is one compensated sample of the room's air.
type Air struct {
	TemperatureC float64
	PressureKPa  float64
	HumidityPct  float64 // 0 when HasHumidity is false
	HasHumidity  bool
	// Standard uncertainties from the data sheet's stated accuracy.
	TemperatureUnc, PressureUnc float64
	Raw                         string // the data registers as read, hex
	Mono                        time.Duration
	Wall                        time.Time
}

// Sensor is an opened BMP280 or BME280.
type Sensor struct {
	c    conn.Conn
	clk  clock.Clock
	name string
	chip byte
	cal  Calibration
}

// Open identifies the chip on c, reads its trimming parameters and writes
// the measurement settings. name labels errors and readings ("room_air").
func Open(c conn.Conn, clk clock.Clock, name string) (*Sensor, error) {
	if name == "" {
		name = "room_air"
	}
	s := &Sensor{c: c, clk: clk, name: name}
	id, err := s.read(regID, 1)
	if err != nil {
		return nil, fmt.Errorf("%s: read chip id: %w", name, err)
	}
	switch id[0] {
	case ChipBMP280, ChipBME280:
		s.chip = id[0]
	default:
		return nil, fmt.Errorf("%s: chip id 0x%02X at register 0xD0, expected 0x58 (BMP280) or 0x60 (BME280): %w", name, id[0], ErrNoSensor)
	}
	tp, err := s.read(regCalibTP, 26)
	if err != nil {
		return nil, fmt.Errorf("%s: read calibration 0x88..0xA1: %w", name, err)
	}
	var h []byte
	if s.chip == ChipBME280 {
		if h, err = s.read(regCalibH, 7); err != nil {
			return nil, fmt.Errorf("%s: read calibration 0xE1..0xE7: %w", name, err)
		}
	}
	if s.cal, err = ParseCalibration(tp, h); err != nil {
		return nil, fmt.Errorf("%s: %w", name, err)
	}
	if s.cal.T1 == 0 || s.cal.P1 == 0 {
		return nil, fmt.Errorf("%s: calibration words dig_T1 = %d, dig_P1 = %d: the chip's trimming memory reads as blank", name, s.cal.T1, s.cal.P1)
	}
	// ctrl_hum takes effect only after a write to ctrl_meas (section 5.4.3).
	if s.chip == ChipBME280 {
		if err := s.write(regCtrlHum, ctrlHumX1); err != nil {
			return nil, fmt.Errorf("%s: write ctrl_hum: %w", name, err)
		}
	}
	if err := s.write(regConfig, configNoIIR); err != nil {
		return nil, fmt.Errorf("%s: write config: %w", name, err)
	}
	if err := s.write(regCtrlMeas, ctrlMeasX1); err != nil { // sleep mode until Sense
		return nil, fmt.Errorf("%s: write ctrl_meas: %w", name, err)
	}
	return s, nil
}

// Chip is the chip id (ChipBMP280 or ChipBME280).
func (s *Sensor) Chip() byte { return s.chip }

// Calibration is the chip's trimming parameters.
func (s *Sensor) Calibration() Calibration { return s.cal }

// Sense takes one forced-mode sample.
func (s *Sensor) Sense(ctx context.Context) (Air, error) {
	if err := s.write(regCtrlMeas, ctrlMeasX1|modeForced); err != nil {
		return Air{}, fmt.Errorf("%s: start conversion: %w", s.name, err)
	}
	if err := s.clk.Sleep(ctx, measureMax); err != nil {
		return Air{}, err
	}
	for waited := measureMax; ; waited += pollInterval {
		st, err := s.read(regStatus, 1)
		if err != nil {
			return Air{}, fmt.Errorf("%s: read status: %w", s.name, err)
		}
		if st[0]&statusMeasuring == 0 {
			break
		}
		if waited >= pollGiveUp {
			return Air{}, fmt.Errorf("%s: conversion still running after %v (status 0x%02X): %w", s.name, waited, st[0], drivers.ErrTimeout)
		}
		if err := s.clk.Sleep(ctx, pollInterval); err != nil {
			return Air{}, err
		}
	}
	n := 6
	if s.chip == ChipBME280 {
		n = 8
	}
	d, err := s.read(regData, n)
	if err != nil {
		return Air{}, fmt.Errorf("%s: read data 0xF7..: %w", s.name, err)
	}
	a, err := s.cal.Compensate(d)
	if err != nil {
		return Air{}, fmt.Errorf("%s: %w", s.name, err)
	}
	a.Mono, a.Wall = s.clk.Mono(), s.clk.Now()
	return a, nil
}

// Compensate turns the data registers read from 0xF7 (6 bytes for a
// BMP280, 8 for a BME280) into an Air sample. Raw values are 20-bit
// (msb, lsb, xlsb[7:4]) for pressure and temperature and 16-bit for
// humidity (section 4 of both data sheets). A skipped measurement
// (0x80000, 0x8000) or a result outside the chip's operating range
// (−40..85 °C, 30..110 kPa) is an error: a broken chip must not feed k_TP.
func (c Calibration) Compensate(d []byte) (Air, error) {
	if len(d) != 6 && len(d) != 8 {
		return Air{}, fmt.Errorf("data block: want 6 or 8 bytes, got %d", len(d))
	}
	adcP := int32(d[0])<<12 | int32(d[1])<<4 | int32(d[2])>>4
	adcT := int32(d[3])<<12 | int32(d[4])<<4 | int32(d[5])>>4
	if adcT == 0x80000 || adcP == 0x80000 {
		return Air{}, fmt.Errorf("data registers %X: temperature or pressure measurement skipped (0x80000)", d)
	}
	t, fine := c.Temperature(adcT)
	pa, ok := c.Pressure(adcP, fine)
	if !ok {
		return Air{}, fmt.Errorf("data registers %X: pressure compensation divides by zero (dig_P1 = %d)", d, c.P1)
	}
	a := Air{TemperatureC: t, PressureKPa: pa / 1000, TemperatureUnc: TemperatureUnc, PressureUnc: PressureUnc, Raw: fmt.Sprintf("%X", d)}
	if t < -40 || t > 85 || a.PressureKPa < 30 || a.PressureKPa > 110 {
		return Air{}, fmt.Errorf("data registers %X: %.2f °C, %.3f kPa is outside the chip's operating range (-40..85 °C, 30..110 kPa)", d, t, a.PressureKPa)
	}
	if len(d) == 8 && c.HasHumidity {
		adcH := int32(d[6])<<8 | int32(d[7])
		if adcH != 0x8000 {
			a.HumidityPct, a.HasHumidity = c.Humidity(adcH, fine), true
		}
	}
	return a, nil
}

// Readings is Sense as two drivers.Readings (temperature in °C, pressure
// in kPa) for the journal, named after the sensor.
func (s *Sensor) Readings(ctx context.Context) (Air, []drivers.Reading, error) {
	a, err := s.Sense(ctx)
	if err != nil {
		return a, nil, err
	}
	return a, a.Readings(s.name), nil
}

// Readings is a as two drivers.Readings named meter.
func (a Air) Readings(meter string) []drivers.Reading {
	mk := func(q units.Quantity, v float64) drivers.Reading {
		u := units.Canonical(q)
		return drivers.Reading{Meter: meter, Quantity: q, Value: v, Unit: u, RawValue: v, RawUnit: u,
			Status: drivers.StatusOK, Raw: a.Raw, Mono: a.Mono, Wall: a.Wall}
	}
	return []drivers.Reading{mk(units.Temperature, a.TemperatureC), mk(units.Pressure, a.PressureKPa)}
}

// Close puts the chip to sleep (it is already asleep between forced
// conversions) and releases nothing else: the bus belongs to the caller.
func (s *Sensor) Close() error { return nil }

// Reset issues the soft reset (0xB6 to register 0xE0).
func (s *Sensor) Reset() error {
	if err := s.write(regReset, resetWord); err != nil {
		return fmt.Errorf("%s: reset: %w", s.name, err)
	}
	return nil
}

func (s *Sensor) read(reg byte, n int) ([]byte, error) {
	b := make([]byte, n)
	if err := s.c.Tx([]byte{reg}, b); err != nil {
		return nil, fmt.Errorf("register 0x%02X: %w", reg, err)
	}
	return b, nil
}

func (s *Sensor) write(reg, v byte) error {
	if err := s.c.Tx([]byte{reg, v}, nil); err != nil {
		return fmt.Errorf("register 0x%02X: %w", reg, err)
	}
	return nil
}
