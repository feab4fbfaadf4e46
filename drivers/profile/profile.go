// Package profile drives a meter whose text protocol is described by a
// profile file (YAML, see FORMAT.md): how to identify it, which set-up
// commands to send and which replies to expect, whether it is polled or
// streams, the regular expression that picks the value, unit and status out
// of a reply, how its numbers are written, and which units it may print.
//
// A new meter with a line-based text protocol needs a profile file, not
// code. Values are converted once, here, into the canonical unit of the
// profile's quantity (package units); a unit the profile does not list, or
// one of the wrong quantity, is drivers.ErrUnit and never a guess.
package profile

import (
	"errors"
	"fmt"
	"regexp"
	"strings"
	"time"

	"kermalux/drivers"
	"kermalux/drivers/serialline"
	"kermalux/drivers/units"
)

// Mode is how readings arrive.
type Mode string

// Reading modes.
const (
	Polled    Mode = "polled"    // host sends a query, meter answers one line
	Streaming Mode = "streaming" // meter pushes lines after a start command
)

// Exchange is a command and the reply that must come back. An empty Expect
// means no reply is awaited.
type Exchange struct {
	Send   string
	Expect string
}

// Sign says whether a number carries a sign.
type Sign string

// Sign rules.
const (
	SignOptional Sign = "optional"
	SignRequired Sign = "required"
	SignNone     Sign = "none"
)

// Exponent says whether a number carries an exponent (E-notation).
type Exponent string

// Exponent rules.
const (
	ExponentOptional Exponent = "optional"
	ExponentRequired Exponent = "required"
	ExponentNone     Exponent = "none"
)

// Numbers is how a meter writes numbers.
type Numbers struct {
	DecimalMark   byte // '.' or ','
	ThousandsMark byte // 0 for none, or ',', '.', ' ', '\''
	Sign          Sign
	Exponent      Exponent
}

// Profile is a checked meter description. Build it with Load or Parse.
type Profile struct {
	// Source is the file the profile came from ("" when parsed from bytes
	// without a name), Name what it calls the meter.
	Source, Name string
	Maker, Model string
	Quantity     units.Quantity
	// Line holds the serial settings and framing; its Port is empty.
	Line serialline.Config
	// Identify is the identification command; IdentifyPattern has named
	// groups maker, model, serial, firmware (each optional).
	Identify        string
	IdentifyPattern *regexp.Regexp
	Setup           []Exchange
	Mode            Mode
	// Query is the polled reading command.
	Query string
	// Start begins streaming (Expect is its acknowledgement); Stop ends it.
	Start Exchange
	Stop  string
	// Period is the streaming interval, or for a polled meter its update
	// interval (it is queried once a period, at a random instant within
	// it: drivers.PollDither); SilentPeriods how many may
	// pass without a line before the watchdog reports a streaming meter
	// silent.
	Period        time.Duration
	SilentPeriods int
	// ReplyTimeout bounds the wait for one reply (meter's clock time).
	ReplyTimeout time.Duration
	// Pattern picks value, unit and status (named groups) out of a line.
	Pattern *regexp.Regexp
	Numbers Numbers
	// Units the meter may print; FixedUnit is used when Pattern has no
	// unit group.
	Units     []string
	FixedUnit string
	// Statuses maps each status token to a status.
	Statuses map[string]drivers.Status

	valueIdx, unitIdx, statusIdx int
}

// Watchdog returns how long a streaming meter may stay silent.
func (p *Profile) Watchdog() time.Duration {
	return p.Period * time.Duration(p.SilentPeriods)
}

// ErrNoValue is returned by ParseLine for a line that carries a status
// other than ok in place of its value or unit (such as "RD OVR"): the
// status is valid, the value means nothing.
var ErrNoValue = errors.New("status word in place of the value or unit")

// ParseLine parses one reply line (without framing) into the value and
// unit as printed and the status. It is a pure function. A line that does
// not match the pattern, a malformed number or an unknown status token is
// drivers.ErrGarbled; a unit the profile does not list is drivers.ErrUnit.
func (p *Profile) ParseLine(line string) (value float64, unit string, status drivers.Status, err error) {
	m := p.Pattern.FindStringSubmatchIndex(line)
	if m == nil {
		return 0, "", "", fmt.Errorf("%w: %q does not match the reply pattern of %s (%s)", drivers.ErrGarbled, line, p.Name, p.Pattern)
	}
	group := func(i int) (string, bool) {
		if i < 0 || m[2*i] < 0 {
			return "", false
		}
		return line[m[2*i]:m[2*i+1]], true
	}
	status = drivers.StatusOK
	if tok, ok := group(p.statusIdx); ok {
		s, known := p.Statuses[tok]
		if !known {
			return 0, "", "", fmt.Errorf("%w: status %q in %q is not one %s uses (expected one of %s)", drivers.ErrGarbled, tok, line, p.Name, strings.Join(p.statusTokens(), ", "))
		}
		status = s
	}
	text, hasValue := group(p.valueIdx)
	u, hasUnit := group(p.unitIdx)
	if status != drivers.StatusOK && (!hasValue || (p.unitIdx >= 0 && !hasUnit)) {
		// A status word in place of the value or the unit: a reading
		// with that status and no value.
		if hasValue {
			value, _ = p.Numbers.Parse(text)
		}
		return value, u, status, ErrNoValue
	}
	value, err = p.Numbers.Parse(text)
	if err != nil {
		return 0, "", status, fmt.Errorf("%w: value in %q: %w", drivers.ErrGarbled, line, err)
	}
	unit = p.FixedUnit
	if hasUnit {
		unit = u
	}
	if !p.listsUnit(unit) {
		return value, unit, status, fmt.Errorf("%w: %q in %q is not a unit %s prints (expected one of %s)", drivers.ErrUnit, unit, line, p.Name, strings.Join(p.Units, ", "))
	}
	return value, unit, status, nil
}

func (p *Profile) listsUnit(u string) bool {
	for _, x := range p.Units {
		if x == u {
			return true
		}
	}
	return false
}

func (p *Profile) statusTokens() []string {
	var out []string
	for _, s := range []drivers.Status{drivers.StatusOK, drivers.StatusOverRange, drivers.StatusUnderRange, drivers.StatusFault} {
		for tok, st := range p.Statuses {
			if st == s {
				out = append(out, tok)
			}
		}
	}
	return out
}

// Convert turns a printed value and unit into the profile's canonical unit.
func (p *Profile) Convert(value float64, unit string) (float64, error) {
	v, err := units.ToCanonical(p.Quantity, value, unit)
	if err != nil {
		return 0, fmt.Errorf("%w: %w", drivers.ErrUnit, err)
	}
	return v, nil
}

// Parse reads a number written in this format. It accepts only digits,
// the marks, a sign and an exponent as the format allows: never "NaN",
// "Inf", hexadecimal or underscores.
func (n Numbers) Parse(s string) (float64, error) {
	var buf [64]byte
	out := buf[:0]
	i := 0
	if len(s) == 0 {
		return 0, fmt.Errorf("empty number")
	}
	if s[0] == '+' || s[0] == '-' {
		if n.Sign == SignNone {
			return 0, fmt.Errorf("%q: sign not expected", s)
		}
		if s[0] == '-' {
			out = append(out, '-')
		}
		i++
	} else if n.Sign == SignRequired {
		return 0, fmt.Errorf("%q: expected a sign (+ or -)", s)
	}
	// Integer part, with optional thousands grouping.
	digits, group, groups := 0, 0, 0
	for ; i < len(s); i++ {
		c := s[i]
		switch {
		case c >= '0' && c <= '9':
			digits++
			group++
			out = append(out, c)
		case n.ThousandsMark != 0 && c == n.ThousandsMark:
			if (groups == 0 && (group == 0 || group > 3)) || (groups > 0 && group != 3) {
				return 0, fmt.Errorf("%q: misplaced thousands separator", s)
			}
			groups++
			group = 0
		default:
			goto frac
		}
		if len(out) > 40 {
			return 0, fmt.Errorf("%q: too many digits", s)
		}
	}
frac:
	if groups > 0 && group != 3 {
		return 0, fmt.Errorf("%q: misplaced thousands separator", s)
	}
	if i < len(s) && s[i] == n.DecimalMark {
		out = append(out, '.')
		i++
		for ; i < len(s) && s[i] >= '0' && s[i] <= '9'; i++ {
			digits++
			out = append(out, s[i])
			if len(out) > 60 {
				return 0, fmt.Errorf("%q: too many digits", s)
			}
		}
	}
	if digits == 0 {
		return 0, fmt.Errorf("%q: expected digits", s)
	}
	if i < len(s) && (s[i] == 'e' || s[i] == 'E') {
		if n.Exponent == ExponentNone {
			return 0, fmt.Errorf("%q: exponent not expected", s)
		}
		out = append(out, 'e')
		i++
		if i < len(s) && (s[i] == '+' || s[i] == '-') {
			out = append(out, s[i])
			i++
		}
		ed := 0
		for ; i < len(s) && s[i] >= '0' && s[i] <= '9'; i++ {
			ed++
			out = append(out, s[i])
			if ed > 4 {
				return 0, fmt.Errorf("%q: exponent too long", s)
			}
		}
		if ed == 0 {
			return 0, fmt.Errorf("%q: expected exponent digits", s)
		}
	} else if n.Exponent == ExponentRequired {
		return 0, fmt.Errorf("%q: expected an exponent (E±nn)", s)
	}
	if i != len(s) {
		return 0, fmt.Errorf("%q: unexpected %q (decimal mark %q)", s, s[i:], string(n.DecimalMark))
	}
	v, err := parseFloat(out)
	if err != nil {
		return 0, fmt.Errorf("%q: out of range", s)
	}
	return v, nil
}
