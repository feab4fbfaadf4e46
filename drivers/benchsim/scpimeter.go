package benchsim

import (
	"fmt"
	"strconv"
	"strings"
	"time"

	"kermalux/drivers"
	"kermalux/drivers/units"
)

// ondrakel is the DX-2 SCPI dialect: LF-terminated program messages of
// IEEE 488.2 with the mandatory common commands and status registers, an
// SCPI error queue (SYSTem:ERRor[:NEXT]?), compound messages whose query
// replies are joined by ';' into one response message, 9.9E37 for over
// range, -9.9E37 for under range and 9.91E37 for a fault.
//
// References (from memory of the published texts): IEEE 488.2-1992 (6.3
// message exchange, 7 program message syntax, 8.4 response messages, 10
// common commands, 11 status reporting) and SCPI 1999.0 (Vol. 1, 6.2
// header rules and 7.2.1 special numbers; Vol. 2, 21.8 the error queue
// and its standard error numbers and messages).
type ondrakel struct {
	b      *Bench
	role   string
	spec   MeterSpec
	unit   string // UGY/S, MR/S, MR/MIN
	errors []string
	esr    byte // Standard Event Status Register (IEEE 488.2, 11.5.1)
	ese    byte // its enable register
	sre    byte // Service Request Enable register (11.3.2)
}

// Standard Event Status Register bits (IEEE 488.2, 11.5.1.1).
const (
	esrOPC = 1 << 0 // operation complete
	esrQYE = 1 << 2 // query error
	esrDDE = 1 << 3 // device-dependent error
	esrEXE = 1 << 4 // execution error
	esrCME = 1 << 5 // command error
	esrPON = 1 << 7 // power on
)

// Status Byte bits (IEEE 488.2, 11.2; SCPI 1999.0 Vol. 1, 9.1: bit 2 is
// the error/event queue summary).
const (
	stbEAV = 1 << 2 // error queue not empty
	stbESB = 1 << 5 // event status summary
	stbMSS = 1 << 6 // master summary status
)

// queueLength is the error queue's length: SCPI asks for at least two;
// when it is full the last entry becomes -350 (Vol. 2, 21.8.2).
const queueLength = 10

// SCPI overflow and not-a-number conventions (SCPI-99, Vol. 1, 7.2.1).
const (
	scpiOverflow  = "9.9E37"
	scpiUnderflow = "-9.9E37"
	scpiNaN       = "9.91E37"
)

// SCPI standard errors (Vol. 2, 21.8), number and message.
const (
	errSyntax       = `-102,"Syntax error"`
	errDataType     = `-104,"Data type error"`
	errParamNot     = `-108,"Parameter not allowed"`
	errParamMissing = `-109,"Missing parameter"`
	errUndefined    = `-113,"Undefined header"`
	errDataRange    = `-222,"Data out of range"`
	errIllegalValue = `-224,"Illegal parameter value"`
	errHardware     = `-240,"Hardware error"`
	errQueueOver    = `-350,"Queue overflow"`
	errInputOverrun = `-363,"Input buffer overrun"`
	errInterrupted  = `-410,"Query INTERRUPTED"`
)

func (h *ondrakel) inEnd() byte                 { return '\n' }
func (h *ondrakel) outEnd() string              { return "\n" }
func (h *ondrakel) streamPeriod() time.Duration { return 0 }
func (h *ondrakel) streamLine() string          { return "" }

// reset is the power-on state: *RST's settings, an empty error queue,
// PON set in the event register and the enable registers cleared
// (IEEE 488.2, 5.12: power-on status clear).
func (h *ondrakel) reset() {
	h.unit, h.errors = h.spec.Unit, nil
	h.esr, h.ese, h.sre = esrPON, 0, 0
}

func (h *ondrakel) overrun() []string {
	h.push(errInputOverrun)
	return nil
}

func (h *ondrakel) interrupted() { h.push(errInterrupted) }

// push queues an error and sets its event bit (IEEE 488.2, 11.5.1.1: the
// hundreds of the number say which).
func (h *ondrakel) push(e string) {
	switch {
	case strings.HasPrefix(e, "-1"):
		h.esr |= esrCME
	case strings.HasPrefix(e, "-2"):
		h.esr |= esrEXE
	case strings.HasPrefix(e, "-3"):
		h.esr |= esrDDE
	case strings.HasPrefix(e, "-4"):
		h.esr |= esrQYE
	}
	if len(h.errors) >= queueLength {
		h.errors[queueLength-1] = errQueueOver
		return
	}
	h.errors = append(h.errors, e)
}

func (h *ondrakel) stb() byte {
	var s byte
	if len(h.errors) > 0 {
		s |= stbEAV
	}
	if h.esr&h.ese != 0 {
		s |= stbESB
	}
	if s&h.sre&^stbMSS != 0 {
		s |= stbMSS
	}
	return s
}

// scpiHeader reports whether the header nodes (upper case) match nodes,
// each given as its short and long form; a node in brackets in the
// standard's notation is optional (opt marks how many trailing nodes may
// be left out).
func scpiHeader(parts []string, opt int, nodes ...[2]string) bool {
	if len(parts) > len(nodes) || len(parts) < len(nodes)-opt {
		return false
	}
	for i, p := range parts {
		if p != nodes[i][0] && p != nodes[i][1] {
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
	nNext = [2]string{"NEXT", "NEXT"}
	nRead = [2]string{"READ", "READ"}
)

// command executes one program message: units separated by ';' (outside
// quotes), a header without a leading ':' taken relative to the previous
// one's path (SCPI Vol. 1, 6.2.4), common commands leaving the path alone.
// The replies of its queries form one response message, joined by ';'
// (IEEE 488.2, 8.4.1); a command error ends the message.
func (h *ondrakel) command(cmd string) []string {
	var out []string
	var path []string
	for _, unit := range splitUnits(cmd) {
		u := strings.TrimSpace(unit)
		if u == "" {
			continue
		}
		before := len(h.errors)
		reply, nodes, ok := h.one(u, path)
		if nodes != nil {
			path = nodes[:len(nodes)-1]
		}
		if ok {
			out = append(out, reply)
		}
		if commandError(h.errors[min(before, len(h.errors)):]) {
			break
		}
	}
	if len(out) == 0 {
		return nil
	}
	return []string{strings.Join(out, ";")}
}

// commandError reports whether errs holds a command error (-1xx): the
// parser stops at one (IEEE 488.2, 6.1.6.1.1); execution errors do not
// stop the message.
func commandError(errs []string) bool {
	for _, e := range errs {
		if strings.HasPrefix(e, "-1") {
			return true
		}
	}
	return false
}

// splitUnits splits a program message at the ';' that are not inside a
// quoted string.
func splitUnits(msg string) []string {
	var units []string
	quote := byte(0)
	start := 0
	for i := 0; i < len(msg); i++ {
		c := msg[i]
		switch {
		case quote != 0:
			if c == quote {
				quote = 0
			}
		case c == '"' || c == '\'':
			quote = c
		case c == ';':
			units = append(units, msg[start:i])
			start = i + 1
		}
	}
	return append(units, msg[start:])
}

// one executes one program message unit and returns its reply (ok when it
// is a query that answered) and, for an SCPI (not common) header, its
// full node path.
func (h *ondrakel) one(u string, path []string) (reply string, nodes []string, ok bool) {
	hdr, arg, hasArg := strings.Cut(u, " ")
	arg = strings.TrimSpace(arg)
	hasArg = hasArg && arg != ""
	hdr = strings.ToUpper(hdr)
	query := strings.HasSuffix(hdr, "?")
	hdr = strings.TrimSuffix(hdr, "?")
	if strings.HasPrefix(hdr, "*") {
		r, ok := h.common(hdr, query, arg, hasArg)
		return r, nil, ok
	}
	if strings.HasPrefix(hdr, ":") {
		hdr, path = hdr[1:], nil
	}
	if hdr == "" || strings.Contains(hdr, "::") || strings.HasSuffix(hdr, ":") {
		h.push(errSyntax)
		return "", nil, false
	}
	nodes = append(append([]string(nil), path...), strings.Split(hdr, ":")...)
	noArg := func() bool {
		if hasArg {
			h.push(errParamNot)
			return false
		}
		return true
	}
	switch {
	case scpiHeader(nodes, 0, nConf, nKrat) && !query:
		if noArg() {
			return "", nodes, false
		}
	case scpiHeader(nodes, 0, nUnit, nKrat) && query:
		if noArg() {
			d := h.b.display(h.role)
			if d.wrongUnit != "" {
				return strings.ToUpper(d.wrongUnit), nodes, true
			}
			return h.unit, nodes, true
		}
	case scpiHeader(nodes, 0, nUnit, nKrat) && !query:
		switch a := strings.ToUpper(arg); {
		case !hasArg:
			h.push(errParamMissing)
		case a == "UGY/S" || a == "MR/S" || a == "MR/MIN":
			h.unit = a
		default:
			h.push(errIllegalValue)
		}
	case scpiHeader(nodes, 0, nRead) && query:
		if noArg() {
			return h.read(), nodes, true
		}
	case scpiHeader(nodes, 1, nSyst, nErr, nNext) && query:
		if noArg() {
			if len(h.errors) == 0 {
				return `0,"No error"`, nodes, true
			}
			e := h.errors[0]
			h.errors = h.errors[1:]
			return e, nodes, true
		}
	default:
		h.push(errUndefined)
	}
	return "", nodes, false
}

// read is READ?: the value in the set unit, or SCPI's markers with the
// matching queue entry.
func (h *ondrakel) read() string {
	d := h.b.display(h.role)
	switch d.status {
	case drivers.StatusOverRange:
		h.push(errDataRange)
		return scpiOverflow
	case drivers.StatusUnderRange:
		h.push(errDataRange)
		return scpiUnderflow
	case drivers.StatusFault:
		h.push(errHardware)
		return scpiNaN
	}
	unit := ondrakelUnit(h.unit)
	if d.wrongUnit != "" {
		// The meter was switched to another unit: it prints its numbers
		// in that one (and says so when asked).
		unit = d.wrongUnit
	}
	return fmt.Sprintf("%.4E", toUnit(units.AirKermaRate, d.value, unit))
}

// common executes an IEEE 488.2 common command (10: the mandatory ones).
func (h *ondrakel) common(hdr string, query bool, arg string, hasArg bool) (string, bool) {
	if query && hasArg || !query && hasArg && !takesArg(hdr) {
		h.push(errParamNot)
		return "", false
	}
	switch {
	case hdr == "*IDN" && query:
		return fmt.Sprintf("ONDRAKEL,DX-2,%s,%s", h.spec.Serial, h.spec.Firmware), true
	case hdr == "*RST" && !query:
		h.unit = h.spec.Unit // settings only: status and queue stay (10.32)
	case hdr == "*CLS" && !query:
		h.errors, h.esr = nil, 0 // clears the event registers and queue (10.3)
	case hdr == "*OPC" && !query:
		h.esr |= esrOPC // no overlapped commands: complete at once (10.18)
	case hdr == "*OPC" && query:
		return "1", true
	case hdr == "*WAI" && !query:
	case hdr == "*TST" && query:
		return "0", true // self-test passed (10.38)
	case hdr == "*ESR" && query:
		v := h.esr
		h.esr = 0 // reading clears it (11.5.1.2)
		return strconv.Itoa(int(v)), true
	case hdr == "*STB" && query:
		return strconv.Itoa(int(h.stb())), true
	case hdr == "*ESE" && query:
		return strconv.Itoa(int(h.ese)), true
	case hdr == "*SRE" && query:
		return strconv.Itoa(int(h.sre)), true
	case (hdr == "*ESE" || hdr == "*SRE") && !query:
		if !hasArg {
			h.push(errParamMissing)
			return "", false
		}
		v, err := strconv.ParseFloat(arg, 64)
		if err != nil {
			h.push(errDataType)
			return "", false
		}
		if v < 0 || v > 255 {
			h.push(errDataRange)
			return "", false
		}
		b := byte(v + 0.5)
		if hdr == "*ESE" {
			h.ese = b
		} else {
			h.sre = b &^ stbMSS // bit 6 cannot be enabled (11.3.2.3)
		}
	default:
		h.push(errUndefined)
	}
	return "", false
}

func takesArg(hdr string) bool { return hdr == "*ESE" || hdr == "*SRE" }
