package serialline

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"os"
	"path/filepath"
	"sync"
	"time"

	"go.bug.st/serial"

	"kermalux/drivers"
	"kermalux/drivers/clock"
)

// Line is one line received, without its framing.
type Line struct {
	Text string
	// Mono and Wall are the clock's times when ReadLine found the line's
	// end. A reader that falls behind a streaming meter stamps late, so
	// read such a meter continuously.
	Mono time.Duration
	Wall time.Time
	// AfterReconnect is true for the first line read after the link was
	// lost and reopened.
	AfterReconnect bool
}

// Options are the optional collaborators of a Port.
type Options struct {
	// Clock stamps lines and paces reopen attempts; the real clock when nil.
	Clock clock.Clock
	// Log receives link events; slog.Default() when nil.
	Log *slog.Logger
	// OpenFunc opens the device; go.bug.st/serial's Open when nil (tests
	// substitute it).
	OpenFunc func(path string, mode *serial.Mode) (serial.Port, error)
}

// Port is a line-framed serial link that survives a pulled cable. A Port
// is used by one goroutine at a time; Close may be called from another.
type Port struct {
	cfg  Config
	mode *serial.Mode
	clk  clock.Clock
	log  *slog.Logger
	open func(string, *serial.Mode) (serial.Port, error)

	mu     sync.Mutex // guards dev and closed against Close
	dev    serial.Port
	closed bool

	device     string // the device the link resolved to at the last open
	gen        uint64 // incremented on every successful open
	marked     bool   // the next line is the first after a reopen
	down       bool
	downErr    error
	nextTry    time.Duration // clock Mono of the next reopen attempt
	backoff    time.Duration
	buf        []byte // received bytes not yet returned: buf[start:end]
	wbuf       []byte // reused for writing
	start, end int
	skipping   bool // discarding the rest of an over-long line
	term       byte
}

// Open opens the port described by cfg. It fails (naming the port) when the
// settings are invalid or the device cannot be opened now; it does not
// retry, so a wrong path is reported at once.
func Open(ctx context.Context, cfg Config, opts Options) (*Port, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	cfg.defaults()
	mode, _ := cfg.mode()
	p := &Port{cfg: cfg, mode: mode, clk: opts.Clock, log: opts.Log, open: opts.OpenFunc}
	if p.clk == nil {
		p.clk = clock.NewReal()
	}
	if p.log == nil {
		p.log = slog.Default()
	}
	if p.open == nil {
		p.open = serial.Open
	}
	p.term = '\n'
	if cfg.ReceiveEnd == CR {
		p.term = '\r'
	}
	p.buf = make([]byte, 2*cfg.MaxLine+512)
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	if err := p.reopen(); err != nil {
		return nil, err
	}
	p.marked = false // the first open is not a reconnection
	return p, nil
}

// Name returns the port as configured (the link, not what it points to).
func (p *Port) Name() string { return p.cfg.Port }

// Device returns the device the port resolved to when last opened.
func (p *Port) Device() string { return p.device }

// Config returns the settings in use (with defaults filled in).
func (p *Port) Config() Config { return p.cfg }

// Generation counts successful opens: 1 after Open, 2 after the first
// reconnection, and so on. A dialect compares it to know when to repeat its
// set-up commands.
func (p *Port) Generation() uint64 { return p.gen }

// Up reports whether the link is currently open.
func (p *Port) Up() bool { return !p.down }

// reopen resolves the link and opens the device, discarding stale input.
func (p *Port) reopen() error {
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.closed {
		return fmt.Errorf("serial port %s: %w", p.cfg.Port, os.ErrClosed)
	}
	if p.dev != nil {
		p.dev.Close()
		p.dev = nil
	}
	dev, err := filepath.EvalSymlinks(p.cfg.Port)
	if err != nil {
		return fmt.Errorf("serial port %s: %w: cannot resolve the port (%w)", p.cfg.Port, drivers.ErrLinkDown, err)
	}
	sp, err := p.open(dev, p.mode)
	if err != nil {
		return fmt.Errorf("serial port %s (%s): %w: cannot open it (%v)", p.cfg.Port, dev, drivers.ErrLinkDown, err)
	}
	if p.cfg.ModemLines {
		if err := sp.SetDTR(true); err != nil {
			p.log.Debug("serial: cannot set DTR", "port", p.cfg.Port, "err", err)
		}
		if err := sp.SetRTS(true); err != nil {
			p.log.Debug("serial: cannot set RTS", "port", p.cfg.Port, "err", err)
		}
	}
	// Stale input from before the pull must not pass as fresh.
	if err := sp.ResetInputBuffer(); err != nil {
		p.log.Debug("serial: cannot flush input", "port", p.cfg.Port, "err", err)
	}
	p.dev = sp
	p.device = dev
	p.gen++
	p.marked = true
	p.down = false
	p.downErr = nil
	p.backoff = 0
	p.start, p.end, p.skipping = 0, 0, false
	return nil
}

// fail marks the link down after err, closing the device.
func (p *Port) fail(err error) error {
	p.mu.Lock()
	if p.dev != nil {
		p.dev.Close()
		p.dev = nil
	}
	closed := p.closed
	p.mu.Unlock()
	if closed {
		return fmt.Errorf("serial port %s: %w", p.cfg.Port, os.ErrClosed)
	}
	werr := fmt.Errorf("serial port %s: %w (%w)", p.cfg.Port, drivers.ErrLinkDown, err)
	if !p.down {
		p.log.Warn("serial link lost", "port", p.cfg.Port, "device", p.device, "err", err)
		p.backoff = 0
		p.nextTry = 0
	}
	p.down = true
	p.downErr = werr
	p.start, p.end, p.skipping = 0, 0, false
	return werr
}

// Ensure makes sure the link is open. While it is down, each call waits for
// the next reopen attempt (backoff from ReopenMin doubling to ReopenMax, on
// the Port's clock, ending early with ctx), tries once, and returns an error
// wrapping drivers.ErrLinkDown if the device is still missing.
func (p *Port) Ensure(ctx context.Context) error {
	p.mu.Lock()
	closed := p.closed
	p.mu.Unlock()
	if closed {
		return fmt.Errorf("serial port %s: %w", p.cfg.Port, os.ErrClosed)
	}
	if !p.down {
		return nil
	}
	if wait := p.nextTry - p.clk.Mono(); wait > 0 {
		if err := p.clk.Sleep(ctx, wait); err != nil {
			return fmt.Errorf("serial port %s: %w (waiting to reopen: %w)", p.cfg.Port, drivers.ErrLinkDown, err)
		}
	}
	if err := p.reopen(); err != nil {
		if p.backoff == 0 {
			p.backoff = p.cfg.ReopenMin
		} else if p.backoff *= 2; p.backoff > p.cfg.ReopenMax {
			p.backoff = p.cfg.ReopenMax
		}
		p.nextTry = p.clk.Mono() + p.backoff
		return err
	}
	p.log.Info("serial link back", "port", p.cfg.Port, "device", p.device)
	return nil
}

// WriteLine sends s followed by the configured line end.
func (p *Port) WriteLine(ctx context.Context, s string) error {
	if err := p.Ensure(ctx); err != nil {
		return err
	}
	b := append(p.wbuf[:0], s...)
	b = append(b, p.cfg.SendEnd.bytes()...)
	p.wbuf = b
	for len(b) > 0 {
		n, err := p.dev.Write(b)
		if err != nil {
			return p.fail(fmt.Errorf("writing %q: %w", s, err))
		}
		if n == 0 {
			return p.fail(fmt.Errorf("writing %q: wrote nothing", s))
		}
		b = b[n:]
	}
	return nil
}

// Flush discards input received but not yet read, in this Port's buffer
// and in the operating system's.
func (p *Port) Flush() {
	p.start, p.end = 0, 0
	p.skipping = false
	if p.dev != nil {
		p.dev.ResetInputBuffer()
	}
}

// Discard drops input received but not yet read, like Flush, and also the
// rest of the line in progress, so the next line returned is one that
// started after the call (a streaming meter's backlog is not passed on as
// fresh, and a line cut by the flush is not reported as garbled). When the
// flush happens to fall between two lines, the first whole line after it is
// dropped too: one reading lost is better than a garbled one.
func (p *Port) Discard() {
	p.Flush()
	p.skipping = true
}

// RealTimeout converts a duration of a meter's clock (a scaled clock in the
// demo) into the operating system's time for read timeouts, never below
// 20 ms; a manual clock (which reports 0) keeps the duration as given.
func RealTimeout(c clock.Clock, d time.Duration) time.Duration {
	r := c.Real(d)
	if r <= 0 {
		return d
	}
	if r < 20*time.Millisecond {
		return 20 * time.Millisecond
	}
	return r
}

// slice is the longest single read, so ctx is honoured promptly.
const slice = 100 * time.Millisecond

// ReadLine returns the next complete line. It fails with drivers.ErrTimeout
// when no line ends within the read timeout (or the deadline of ctx, if
// sooner), with drivers.ErrGarbled for a line longer than MaxLine (the rest
// of it is skipped), and with drivers.ErrLinkDown when the device is gone.
func (p *Port) ReadLine(ctx context.Context) (Line, error) {
	return p.ReadLineTimeout(ctx, p.cfg.ReadTimeout)
}

// ReadLineTimeout is ReadLine with a timeout other than the configured one
// (real time).
func (p *Port) ReadLineTimeout(ctx context.Context, timeout time.Duration) (Line, error) {
	if err := p.Ensure(ctx); err != nil {
		return Line{}, err
	}
	deadline := time.Now().Add(timeout)
	if d, ok := ctx.Deadline(); ok && d.Before(deadline) {
		deadline = d
	}
	for {
		if l, ok, err := p.scan(); ok || err != nil {
			return l, err
		}
		if err := ctx.Err(); err != nil {
			return Line{}, err
		}
		left := time.Until(deadline)
		if left <= 0 {
			return Line{}, p.timeout(timeout)
		}
		if left > slice {
			left = slice
		}
		if err := p.fill(left); err != nil {
			return Line{}, err
		}
	}
}

func (p *Port) timeout(timeout time.Duration) error {
	if p.end > p.start && !p.skipping {
		partial := string(p.buf[p.start:p.end])
		p.start, p.end = 0, 0
		return fmt.Errorf("serial port %s: %w: no line end (%s) within %v after the partial line %q", p.cfg.Port, drivers.ErrTimeout, p.cfg.ReceiveEnd, timeout, partial)
	}
	return fmt.Errorf("serial port %s: %w: no line (ending in %s) within %v", p.cfg.Port, drivers.ErrTimeout, p.cfg.ReceiveEnd, timeout)
}

// scan looks for a complete line in the buffer.
func (p *Port) scan() (Line, bool, error) {
	for {
		data := p.buf[p.start:p.end]
		i := bytes.IndexByte(data, p.term)
		if i < 0 {
			if len(data) > p.cfg.MaxLine || (p.skipping && len(data) > 0) {
				// Too long: drop what we have and skip to the next line end.
				first := !p.skipping
				p.start, p.end = 0, 0
				p.skipping = true
				if first {
					return Line{}, false, fmt.Errorf("serial port %s: %w: line longer than %d bytes (expected lines ending in %s)", p.cfg.Port, drivers.ErrGarbled, p.cfg.MaxLine, p.cfg.ReceiveEnd)
				}
			}
			return Line{}, false, nil
		}
		line := data[:i]
		p.start += i + 1
		if p.skipping {
			p.skipping = false
			continue
		}
		switch p.cfg.ReceiveEnd {
		case CRLF, LF:
			line = bytes.TrimSuffix(line, []byte{'\r'})
		case CR:
			line = bytes.TrimPrefix(line, []byte{'\n'})
		}
		if len(line) > p.cfg.MaxLine {
			return Line{}, false, fmt.Errorf("serial port %s: %w: line longer than %d bytes", p.cfg.Port, drivers.ErrGarbled, p.cfg.MaxLine)
		}
		if len(line) == 0 {
			continue // blank lines (a CR LF pair split oddly) carry nothing
		}
		l := Line{Text: string(line), Mono: p.clk.Mono(), Wall: p.clk.Now(), AfterReconnect: p.marked}
		p.marked = false
		if p.start == p.end {
			p.start, p.end = 0, 0
		}
		return l, true, nil
	}
}

// fill reads once, waiting at most d.
func (p *Port) fill(d time.Duration) error {
	if p.start > 0 && p.end == len(p.buf) {
		n := copy(p.buf, p.buf[p.start:p.end])
		p.start, p.end = 0, n
	}
	if p.end == len(p.buf) {
		// Cannot happen while MaxLine bounds the buffered line; be safe.
		p.start, p.end = 0, 0
	}
	dev := p.dev
	if dev == nil {
		return p.fail(errors.New("port not open"))
	}
	if err := dev.SetReadTimeout(d); err != nil {
		return p.fail(fmt.Errorf("setting read timeout: %w", err))
	}
	began := time.Now()
	n, err := dev.Read(p.buf[p.end:])
	if err != nil {
		if errors.Is(err, io.EOF) {
			return p.fail(errors.New("end of file: device removed"))
		}
		var pe *serial.PortError
		if errors.As(err, &pe) && pe.Code() == serial.PortClosed {
			return p.fail(errors.New("device removed or port closed"))
		}
		return p.fail(err)
	}
	if n == 0 && time.Since(began) < d/2 {
		// A timeout that came back far too early: the device is gone.
		return p.fail(errors.New("zero-byte read before the timeout: device removed"))
	}
	p.end += n
	return nil
}

// Close closes the port; later calls fail with os.ErrClosed.
func (p *Port) Close() error {
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.closed {
		return nil
	}
	p.closed = true
	if p.dev != nil {
		err := p.dev.Close()
		p.dev = nil
		if err != nil {
			return fmt.Errorf("serial port %s: closing: %w", p.cfg.Port, err)
		}
	}
	return nil
}
