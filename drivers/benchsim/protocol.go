package benchsim

import (
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"

	"kermalux/drivers"
	"kermalux/drivers/units"
)

// display is what a meter shows at one moment, after range limits and
// injected faults.
type display struct {
	value     float64 // canonical unit
	status    drivers.Status
	wrongUnit string // non-empty during a wrong_unit fault
}

// display takes a reading of role's meter now.
func (b *Bench) display(role string) display {
	b.mu.Lock()
	defer b.mu.Unlock()
	t := b.clk.Mono()
	var mv MeterValue
	var spec MeterSpec
	if role == RoleDosimeter {
		mv, spec = b.model.DoseReading(t), b.scn.Dosimeter
	} else {
		mv, spec = b.model.LumReading(t), b.scn.Photometer
	}
	return showOn(spec, mv.Value, b, role, t)
}

// showOn applies range limits and faults to a value. The caller holds b.mu.
func showOn(spec MeterSpec, v float64, b *Bench, role string, t time.Duration) display {
	d := display{value: v, status: drivers.StatusOK}
	switch {
	case v > spec.Range.Max:
		d.value, d.status = spec.Range.Max, drivers.StatusOverRange
	case v < spec.Range.Min:
		d.status = drivers.StatusUnderRange
	}
	if _, ok := b.activeFault(role, FaultOverRange, t); ok {
		d.value, d.status = spec.Range.Max, drivers.StatusOverRange
	}
	if f, ok := b.activeFault(role, FaultWrongUnit, t); ok {
		d.wrongUnit = f.Unit
	}
	return d
}

// dialect is one meter's wire protocol: it answers commands and, for a
// streaming meter, produces lines at its rate.
type dialect interface {
	// inEnd is the byte that ends a host command; the other line-end
	// byte is ignored.
	inEnd() byte
	// outEnd is what ends every line the meter sends.
	outEnd() string
	// command answers one command (without its line end); nil = silence.
	command(cmd string) []string
	// streamPeriod is the time between streamed lines, 0 when silent.
	streamPeriod() time.Duration
	// streamLine is the next streamed line.
	streamLine() string
	// reset returns the meter to its power-on state (after re-plugging).
	reset()
	// overrun answers a command longer than the meter's input buffer
	// (maxCommand bytes), whose rest was dropped; nil = silence.
	overrun() []string
}

// maxCommand is the longest command a simulated meter takes; longer ones
// are dropped and answered by overrun.
const maxCommand = 256

// interrupter is a dialect that must know when a new command arrives
// while its last reply is unread (IEEE 488.2, 6.3.2.3: query
// interrupted); the unread reply has been thrown away.
type interrupter interface {
	interrupted()
}

func newDialect(b *Bench, role string, spec MeterSpec) dialect {
	switch spec.Protocol {
	case ProtocolOndrakel:
		h := &ondrakel{b: b, role: role, spec: spec}
		h.reset()
		return h
	case ProtocolVessoric:
		o := &vessoric{b: b, role: role, spec: spec}
		o.reset()
		return o
	default:
		v := &veltrane{b: b, role: role, spec: spec}
		v.reset()
		return v
	}
}

// baudOf is the serial speed of each protocol (meters.md).
func baudOf(protocol string) int {
	if protocol == ProtocolVeltrane {
		return 9600
	}
	return 19200
}

// veltrane is the KR-40 text protocol: CR-terminated commands, one
// CR LF-terminated reply each, polled readings.
type veltrane struct {
	b    *Bench
	role string
	spec MeterSpec
	unit string // printed unit
}

func (v *veltrane) inEnd() byte                 { return '\r' }
func (v *veltrane) outEnd() string              { return "\r\n" }
func (v *veltrane) streamPeriod() time.Duration { return 0 }
func (v *veltrane) streamLine() string          { return "" }
func (v *veltrane) reset()                      { v.unit = v.spec.Unit }
func (v *veltrane) overrun() []string           { return []string{"ERR 10"} }
func (v *veltrane) command(cmd string) []string {
	c := strings.ToUpper(strings.TrimSpace(cmd))
	switch {
	case c == "":
		return nil
	case c == "ID?":
		return []string{fmt.Sprintf("VELTRANE KR-40 SN=%s FW=%s", v.spec.Serial, v.spec.Firmware)}
	case c == "REMOTE":
		return []string{"OK"}
	case strings.HasPrefix(c, "UNIT "):
		switch strings.TrimSpace(c[5:]) {
		case "UGY/S":
			v.unit = "uGy/s"
		case "MR/S":
			v.unit = "mR/s"
		case "MR/MIN":
			v.unit = "mR/min"
		default:
			return []string{"ERR 10"}
		}
		return []string{"OK"}
	case c == "RD?":
		d := v.b.display(v.role)
		unit := v.unit
		val := toUnit(units.AirKermaRate, d.value, unit)
		if d.wrongUnit != "" {
			unit = d.wrongUnit
		}
		return []string{fmt.Sprintf("RD %+.4E %s %s", val, unit, veltraneStatus(d.status))}
	}
	return []string{"ERR 10"}
}

func veltraneStatus(s drivers.Status) string {
	switch s {
	case drivers.StatusOverRange:
		return "OVR"
	case drivers.StatusUnderRange:
		return "UND"
	case drivers.StatusFault:
		return "ERR"
	}
	return "OK"
}

// toUnit converts a canonical value into a printed unit.
func toUnit(q units.Quantity, v float64, unit string) float64 {
	out, err := units.FromCanonical(q, v, unit)
	if err != nil {
		return v // only checked units reach here
	}
	return out
}

func ondrakelUnit(u string) string {
	switch u {
	case "MR/S":
		return "mR/s"
	case "MR/MIN":
		return "mR/min"
	}
	return "uGy/s"
}

// vessoric is the LM-9 streaming photometer: LF-terminated, "STREAM n"
// starts n lines a second, "STOP" stops.
type vessoric struct {
	b      *Bench
	role   string
	spec   MeterSpec
	rateHz int
}

func (o *vessoric) inEnd() byte       { return '\n' }
func (o *vessoric) outEnd() string    { return "\n" }
func (o *vessoric) reset()            { o.rateHz = 0 }
func (o *vessoric) overrun() []string { return []string{"ERR"} }
func (o *vessoric) streamPeriod() time.Duration {
	if o.rateHz == 0 {
		return 0
	}
	return time.Second / time.Duration(o.rateHz)
}

func (o *vessoric) command(cmd string) []string {
	c := strings.ToUpper(strings.TrimSpace(cmd))
	switch {
	case c == "":
		return nil
	case c == "IDN":
		return []string{"VESSORIC LM-9 #" + o.spec.Serial}
	case c == "STOP":
		o.rateHz = 0
		return nil
	case strings.HasPrefix(c, "STREAM "):
		n, err := strconv.Atoi(strings.TrimSpace(c[7:]))
		if err != nil || n < 1 || float64(n) > o.spec.MaxRateHz {
			return []string{"ERR"}
		}
		o.rateHz = n
		return []string{"ACK"}
	}
	return []string{"ERR"}
}

func (o *vessoric) streamLine() string {
	d := o.b.display(o.role)
	unit := o.spec.Unit
	val := toUnit(units.Luminance, d.value, unit)
	if d.wrongUnit != "" {
		unit = d.wrongUnit
	}
	return "L " + decimalComma(val) + " " + unit + " " + vessoricStatus(d.status)
}

func vessoricStatus(s drivers.Status) string {
	switch s {
	case drivers.StatusOverRange:
		return "S1"
	case drivers.StatusUnderRange:
		return "S2"
	case drivers.StatusFault:
		return "S9"
	}
	return "S0"
}

// decimalComma prints v with five significant digits, no exponent and a
// decimal comma ("123,45", "0,012345").
func decimalComma(v float64) string {
	dec := 4
	if a := math.Abs(v); a > 0 {
		dec = 4 - int(math.Floor(math.Log10(a)))
	}
	dec = max(0, min(dec, 6))
	return strings.Replace(strconv.FormatFloat(v, 'f', dec, 64), ".", ",", 1)
}
