// Package serialline is the line transport under the meter dialects: a
// serial port opened by path or by a stable link (a /dev/serial/by-id
// symlink), read and written one framed line at a time, with explicit
// timeouts and a pulled cable reported as drivers.ErrLinkDown and healed by
// reopening the link.
//
// go.bug.st/serial reports a read timeout as (0, nil); this package turns it
// into drivers.ErrTimeout. A background goroutine reads the device all the
// time and stamps each line when its end arrives, so readings carry the
// meter's timing whatever the caller was doing. A read that fails (EOF, EIO, the library's
// "port closed") or a zero-byte read that comes back well before its
// timeout means the device is gone: the port is closed, and the next call
// re-resolves the link, reopens it with a backoff, discards any stale
// input, and marks the first line it returns (Line.AfterReconnect).
package serialline

import (
	"fmt"
	"strings"
	"time"

	"go.bug.st/serial"
)

// Framing is how a line ends on the wire.
type Framing string

// Line endings.
const (
	CR   Framing = "cr"   // "\r"
	LF   Framing = "lf"   // "\n"
	CRLF Framing = "crlf" // "\r\n"
)

// ParseFraming reads a framing name: cr, lf or crlf (case-insensitive).
func ParseFraming(s string) (Framing, error) {
	switch f := Framing(strings.ToLower(strings.TrimSpace(s))); f {
	case CR, LF, CRLF:
		return f, nil
	}
	return "", fmt.Errorf("line end %q: expected cr, lf or crlf", s)
}

func (f Framing) bytes() string {
	switch f {
	case CR:
		return "\r"
	case CRLF:
		return "\r\n"
	}
	return "\n"
}

// String returns the framing as people write it ("CR LF").
func (f Framing) String() string {
	switch f {
	case CR:
		return "CR"
	case LF:
		return "LF"
	case CRLF:
		return "CR LF"
	}
	return string(f)
}

// Parity names.
const (
	ParityNone  = "none"
	ParityOdd   = "odd"
	ParityEven  = "even"
	ParityMark  = "mark"
	ParitySpace = "space"
)

// Flow control names. go.bug.st/serial v1.8 always switches RTS/CTS and
// XON/XOFF off when it opens a port, so only FlowNone can be honoured; the
// others are refused with an error rather than silently ignored.
const (
	FlowNone    = "none"
	FlowRTSCTS  = "rts-cts"
	FlowXONXOFF = "xon-xoff"
)

// Bounds of the settings: together they bound the memory one port holds
// (BufferLimit lines of at most MaxLineLimit bytes, and usually far less).
const (
	MaxLineLimit = 64 << 10
	BufferLimit  = 4096
)

// Config describes one serial link.
type Config struct {
	// Port is a device path (/dev/ttyUSB0) or a stable link to one
	// (/dev/serial/by-id/...). A link is resolved again on every reopen.
	Port string
	// Baud rate; 9600 when zero.
	Baud int
	// DataBits: 5 to 8; 8 when zero.
	DataBits int
	// Parity: none, odd, even, mark, space; none when empty.
	Parity string
	// StopBits: 1 or 2; 1 when zero.
	StopBits int
	// Flow control: none (rts-cts and xon-xoff are refused, see FlowNone).
	Flow string
	// SendEnd is appended to every line written; ReceiveEnd ends every line
	// read. CR LF on receive also accepts a bare LF.
	SendEnd, ReceiveEnd Framing
	// ReadTimeout bounds one ReadLine, in real time; 1 s when zero.
	ReadTimeout time.Duration
	// MaxLine is the longest line accepted, in bytes; 256 when zero, at
	// most MaxLineLimit. A longer line is reported as drivers.ErrGarbled
	// (once) and skipped.
	MaxLine int
	// Buffer is how many received lines are held for the caller; 256 when
	// zero, at most BufferLimit. When it is full the oldest line is
	// dropped and counted (Port.Overflows).
	Buffer int
	// ReopenMin and ReopenMax bound the backoff between reopen attempts
	// after the link went down (clock time); 100 ms and 2 s when zero.
	ReopenMin, ReopenMax time.Duration
	// ModemLines, when true, raises DTR and RTS after opening. A
	// pseudo-terminal refuses these calls; failures are logged, not fatal.
	ModemLines bool
}

func (c *Config) defaults() {
	if c.Baud == 0 {
		c.Baud = 9600
	}
	if c.DataBits == 0 {
		c.DataBits = 8
	}
	if c.Parity == "" {
		c.Parity = ParityNone
	}
	if c.StopBits == 0 {
		c.StopBits = 1
	}
	if c.Flow == "" {
		c.Flow = FlowNone
	}
	if c.SendEnd == "" {
		c.SendEnd = LF
	}
	if c.ReceiveEnd == "" {
		c.ReceiveEnd = LF
	}
	if c.ReadTimeout <= 0 {
		c.ReadTimeout = time.Second
	}
	if c.MaxLine <= 0 {
		c.MaxLine = 256
	}
	if c.Buffer <= 0 {
		c.Buffer = 256
	}
	if c.ReopenMin <= 0 {
		c.ReopenMin = 100 * time.Millisecond
	}
	if c.ReopenMax <= 0 {
		c.ReopenMax = 2 * time.Second
	}
	if c.ReopenMax < c.ReopenMin {
		c.ReopenMax = c.ReopenMin
	}
}

// Validate checks the settings (after defaults) and names the first bad one.
func (c Config) Validate() error {
	c.defaults()
	if c.Port == "" {
		return fmt.Errorf("serial port: no port given (expected a device path or a /dev/serial/by-id link)")
	}
	if _, err := c.mode(); err != nil {
		return fmt.Errorf("serial port %s: %w", c.Port, err)
	}
	for _, f := range []Framing{c.SendEnd, c.ReceiveEnd} {
		if _, err := ParseFraming(string(f)); err != nil {
			return fmt.Errorf("serial port %s: %w", c.Port, err)
		}
	}
	if c.MaxLine > MaxLineLimit {
		return fmt.Errorf("serial port %s: longest line %d bytes: expected at most %d", c.Port, c.MaxLine, MaxLineLimit)
	}
	if c.Buffer > BufferLimit {
		return fmt.Errorf("serial port %s: buffer of %d lines: expected at most %d", c.Port, c.Buffer, BufferLimit)
	}
	switch c.Flow {
	case FlowNone:
	case FlowRTSCTS, FlowXONXOFF:
		return fmt.Errorf("serial port %s: flow control %q is not supported by the serial library (it always turns flow control off); use none", c.Port, c.Flow)
	default:
		return fmt.Errorf("serial port %s: flow control %q: expected none, rts-cts or xon-xoff", c.Port, c.Flow)
	}
	return nil
}

func (c Config) mode() (*serial.Mode, error) {
	m := &serial.Mode{BaudRate: c.Baud, DataBits: c.DataBits}
	if c.Baud < 50 || c.Baud > 4000000 {
		return nil, fmt.Errorf("baud rate %d: expected 50 to 4000000", c.Baud)
	}
	if c.DataBits < 5 || c.DataBits > 8 {
		return nil, fmt.Errorf("data bits %d: expected 5 to 8", c.DataBits)
	}
	switch c.Parity {
	case ParityNone:
		m.Parity = serial.NoParity
	case ParityOdd:
		m.Parity = serial.OddParity
	case ParityEven:
		m.Parity = serial.EvenParity
	case ParityMark:
		m.Parity = serial.MarkParity
	case ParitySpace:
		m.Parity = serial.SpaceParity
	default:
		return nil, fmt.Errorf("parity %q: expected none, odd, even, mark or space", c.Parity)
	}
	switch c.StopBits {
	case 1:
		m.StopBits = serial.OneStopBit
	case 2:
		m.StopBits = serial.TwoStopBits
	default:
		return nil, fmt.Errorf("stop bits %d: expected 1 or 2", c.StopBits)
	}
	return m, nil
}
