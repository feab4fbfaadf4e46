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

// ondrakel is the DX-2 SCPI dialect: LF-terminated, IEEE 488.2 common
// commands, an error queue, 9.9E37 for over range and 9.91E37 for a fault.
type ondrakel struct {
	b      *Bench
	role   string
	spec   MeterSpec
	unit   string // UGY/S, MR/S, MR/MIN
	errors []string
}

// SCPI overflow and not-a-number conventions (SCPI-99, Vol. 1, 7.2.1).
const (
	scpiOverflow = "9.9E37"
	scpiNaN      = "9.91E37"
)

func (h *ondrakel) inEnd() byte                 { return '\n' }
func (h *ondrakel) outEnd() string              { return "\n" }
func (h *ondrakel) streamPeriod() time.Duration { return 0 }
func (h *ondrakel) streamLine() string          { return "" }
func (h *ondrakel) reset()                      { h.unit, h.errors = h.spec.Unit, nil }

func (h *ondrakel) push(e string) {
	if len(h.errors) >= 10 {
		h.errors[9] = `-350,"Queue overflow"`
		return
	}
	h.errors = append(h.errors, e)
}

// scpiHeader reports whether hdr (upper case, no leading colon) matches
// the nodes, each given in long form with its short form as the upper
// case prefix length: SCPI accepts either form, case-insensitively.
func scpiHeader(hdr string, nodes ...[2]string) bool {
	parts := strings.Split(strings.TrimPrefix(hdr, ":"), ":")
	if len(parts) != len(nodes) {
		return false
	}
	for i, n := range nodes {
		if parts[i] != n[0] && parts[i] != n[1] {
			return false
		}
	}
	return true
}

var (
	nConf = [2]string{"CONF", "CONFIGURE"}
	nKrat = [2]string{"KRAT", "KRATE"}
	nUnit = [2]string{"UNIT", "UNIT"}
	nSyst = [2]string{"SYST", "SYSTEM"}
	nErr  = [2]string{"ERR", "ERROR"}
	nRead = [2]string{"READ", "READ"}
)

func (h *ondrakel) command(cmd string) []string {
	var out []string
	for _, one := range strings.Split(cmd, ";") {
		out = append(out, h.one(strings.TrimSpace(one))...)
	}
	return out
}

func (h *ondrakel) one(cmd string) []string {
	if cmd == "" {
		return nil
	}
	hdr, arg, _ := strings.Cut(strings.ToUpper(cmd), " ")
	arg = strings.TrimSpace(arg)
	query := strings.HasSuffix(hdr, "?")
	hdr = strings.TrimSuffix(hdr, "?")
	switch {
	case hdr == "*IDN" && query:
		return []string{fmt.Sprintf("ONDRAKEL,DX-2,%s,%s", h.spec.Serial, h.spec.Firmware)}
	case hdr == "*RST" && !query:
		h.unit = h.spec.Unit
		return nil
	case hdr == "*CLS" && !query:
		h.errors = nil
		return nil
	case scpiHeader(hdr, nConf, nKrat) && !query:
		return nil
	case scpiHeader(hdr, nUnit, nKrat) && query:
		d := h.b.display(h.role)
		if d.wrongUnit != "" {
			return []string{strings.ToUpper(d.wrongUnit)}
		}
		return []string{h.unit}
	case scpiHeader(hdr, nUnit, nKrat) && !query:
		switch arg {
		case "UGY/S", "MR/S", "MR/MIN":
			h.unit = arg
		default:
			h.push(`-224,"Illegal parameter value"`)
		}
		return nil
	case scpiHeader(hdr, nRead) && query:
		d := h.b.display(h.role)
		switch d.status {
		case drivers.StatusOverRange:
			h.push(`-222,"Data out of range"`)
			return []string{scpiOverflow}
		case drivers.StatusFault:
			h.push(`-240,"Hardware error"`)
			return []string{scpiNaN}
		}
		val := toUnit(units.AirKermaRate, d.value, ondrakelUnit(h.unit))
		return []string{fmt.Sprintf("%.4E", val)}
	case scpiHeader(hdr, nSyst, nErr) && query:
		if len(h.errors) == 0 {
			return []string{`0,"No error"`}
		}
		e := h.errors[0]
		h.errors = h.errors[1:]
		return []string{e}
	}
	h.push(`-113,"Undefined header"`)
	return nil
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

func (o *vessoric) inEnd() byte    { return '\n' }
func (o *vessoric) outEnd() string { return "\n" }
func (o *vessoric) reset()         { o.rateHz = 0 }
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
