package engine

import (
	"context"
	"errors"
	"fmt"
	"math"
	"strings"

	"kermalux/drivers/roomair"
	"kermalux/drivers/units"
	"kermalux/procedures/entry"
	"kermalux/procedures/panel"
)

// RoomAir is the role of the room-air sensor (Config.RoomAir), the third
// sensor beside the dosimeter and the photometer.
const RoomAir = "room_air"

// evRoomAirFailed is journalled when the room-air sensor gave no usable
// sample for an enter step that asks for it: the value is entered instead.
const evRoomAirFailed = "room_air_failed"

// AirSensor is the room-air sensor: one sample of the room's temperature
// (°C) and pressure (kPa) with their standard uncertainties.
// *roomair.Sensor implements it.
type AirSensor interface {
	Sense(ctx context.Context) (roomair.Air, error)
}

// Resolutions the sensor's values are kept at: 0.01 °C and 1 Pa, the
// BME280's own output resolution for temperature (BST-BME280-DS002 rev. 1.6
// section 4.2.3, 0.01 °C steps) and a step far below its stated ±1 hPa for
// pressure. The journal then holds the values as a display would show them
// (a whole number of steps divided by the steps per unit: the same float
// as the decimal typed in).
const (
	airPerC   = 100  // steps per °C
	airPerKPa = 1000 // steps per kPa
)

// enterFromSensor takes an enter step's temperature or pressure from the
// room-air sensor when the step asks for the sensor (source: sensor) and
// one is configured: the value is journalled with its source and standard
// uncertainty and said aloud, and no press is needed. It reports false
// (the step is asked as before) when there is no sensor, the step asks for
// another value, or the sensor fails or reads outside the step's range;
// a failure is journalled and said.
func (e *Engine) enterFromSensor(ctx context.Context, idx int, s Step) (bool, error) {
	v := s.Value
	if e.cfg.RoomAir == nil || v == nil || v.Source != "sensor" {
		return false, nil
	}
	var q units.Quantity
	switch v.Name {
	case "temperature":
		q = units.Temperature
	case "pressure":
		q = units.Pressure
	default:
		return false, nil
	}
	a, err := e.cfg.RoomAir.Sense(ctx)
	if err != nil && ctx.Err() != nil {
		return true, ctx.Err()
	}
	var canon, u float64
	if err == nil {
		if q == units.Temperature {
			canon, u = math.Round(a.TemperatureC*airPerC)/airPerC, a.TemperatureUnc
		} else {
			canon, u = math.Round(a.PressureKPa*airPerKPa)/airPerKPa, a.PressureUnc
		}
	}
	val, uval := canon, u
	if err == nil {
		if val, err = units.FromCanonical(q, canon, v.Unit); err == nil {
			var hi float64
			if hi, err = units.FromCanonical(q, canon+u, v.Unit); err == nil {
				uval = hi - val
			}
		}
	}
	if err == nil && (v.Min != 0 || v.Max != 0) && (val < v.Min || val > v.Max) {
		err = fmt.Errorf("%s %s %s is outside %s to %s %s", RoomAir, fmtNum(val), v.Unit, fmtNum(v.Min), fmtNum(v.Max), v.Unit)
	}
	name := strings.ReplaceAll(v.Name, "_", " ")
	if err != nil {
		if jerr := e.journal(ctx, entry.KindEvent, entry.Event{Step: idx, Name: evRoomAirFailed, Detail: fmt.Sprintf("%s for the %s: %v", RoomAir, name, err), BeamOn: e.st.beamOn.Seconds()}); jerr != nil {
			return true, errors.Join(jerr, err)
		}
		return false, e.say(ctx, idx, panel.Message{Text: e.t("The room air sensor gave no usable %s. Enter it by hand.", e.text(name)), Level: panel.Warn})
	}
	e.st.values[v.Name] = canon
	e.st.setUnc(v.Name, u)
	e.st.origins[v.Name] = valueOrigin{step: idx, mode: s.FieldMode, text: fmtNum(val) + " " + v.Unit + ", sensor"}
	if err := e.journal(ctx, entry.KindValue, entry.Value{Step: idx, Name: v.Name, Value: val, Unit: v.Unit, Source: "sensor",
		FieldMode: s.FieldMode, StdUnc: uval, Sensor: RoomAir, Raw: a.Raw}); err != nil {
		return true, err
	}
	text := e.t("%s %s %s, from the room air sensor.", e.text(nameOf(v.Name)), e.num(val), v.Unit)
	return true, e.say(ctx, idx, panel.Message{Text: text, Level: panel.Info})
}

// setUnc keeps the standard uncertainty (canonical unit) of a value read
// by a sensor; 0 forgets it (an entered value: the corrector's own
// thermometer and barometer uncertainties apply).
func (st *state) setUnc(name string, u float64) {
	if u <= 0 {
		delete(st.valueUnc, name)
		return
	}
	if st.valueUnc == nil {
		st.valueUnc = map[string]float64{}
	}
	st.valueUnc[name] = u
}

// noteUnc rebuilds setUnc from a journalled value (resume).
func (st *state) noteUnc(v entry.Value) {
	u := v.StdUnc
	if q, err := units.QuantityOf(v.Unit); err == nil && u > 0 {
		lo, err1 := units.ToCanonical(q, v.Value, v.Unit)
		hi, err2 := units.ToCanonical(q, v.Value+u, v.Unit)
		if err1 == nil && err2 == nil {
			u = hi - lo
		}
	}
	st.setUnc(v.Name, u)
}
