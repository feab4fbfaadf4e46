package serialline

import (
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"log/slog"
	"os"
	"path/filepath"
	"sync"
	"sync/atomic"
	"syscall"
	"time"

	"go.bug.st/serial"

	"kermalux/drivers"
	"kermalux/drivers/clock"
)

// Line is one line received, without its framing.
type Line struct {
	Text string
	// Mono and Wall are the clock's times when the line's end arrived: the
	// port's background reader stamps each line as it comes off the wire,
	// so a caller that was busy elsewhere still gets the meter's timing.
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

// Errors that say why a port could not be opened; they are wrapped with
// the port's name and a hint, and (after the link was once up) with
// drivers.ErrLinkDown. Test them with errors.Is.
var (
	ErrNoDevice   = errors.New("no such device")
	ErrNotSerial  = errors.New("not a serial device")
	ErrPermission = errors.New("permission denied")
	ErrBusy       = errors.New("port busy")
)

// event is what the background reader hands over: a stamped line, or an
// error (an over-long line, the device gone).
type event struct {
	line Line
	err  error
	gone bool // err means the device is gone
}

// reader is the background goroutine of one opened device.
type reader struct {
	dev    serial.Port
	stop   atomic.Bool
	done   chan struct{}
	exited bool // set under Port.mu when the goroutine ends
}

// Port is a line-framed serial link that survives a pulled cable. A
// background goroutine reads the device continuously, frames lines and
// stamps each on arrival into a bounded queue (Config.Buffer lines; when
// it is full the oldest line is dropped and counted, see Overflows).
// A Port is used by one goroutine at a time; Close may be called from
// another.
type Port struct {
	cfg  Config
	mode *serial.Mode
	clk  clock.Clock
	log  *slog.Logger
	open func(string, *serial.Mode) (serial.Port, error)

	// mu guards what the reader shares: the device, the queue, the line
	// in progress, the flush epoch, closed.
	mu       sync.Mutex
	flushed  chan struct{} // closed when the reader has done the flush asked for (epoch), or ended
	dev      serial.Port
	rd       *reader
	closed   bool
	queue    []event       // FIFO, at most cfg.Buffer lines
	partial  []byte        // the line in progress
	skipping bool          // dropping the rest of a line (too long, or cut by a flush)
	epoch    uint64        // incremented by Flush: a flush of the device is asked for
	ack      uint64        // the epoch the reader last emptied the device's input for
	overflow uint64        // lines dropped because the queue was full
	spilling bool          // an overflow was logged and the queue has not emptied since
	received uint64        // bytes the reader has taken off the device, since Open
	changed  chan struct{} // closed (and cleared) when the reader changes anything; made by a waiter
	notify   chan struct{}

	// The rest is the caller's.
	device  string // the device the link resolved to at the last open
	gen     uint64 // incremented on every successful open
	marked  bool   // the next line is the first after a reopen
	down    bool
	nextTry time.Duration // clock Mono of the next reopen attempt
	backoff time.Duration
	wbuf    []byte // reused for writing
	term    byte
}

// Open opens the port described by cfg. It fails (naming the port and
// saying why: no such device, not a serial device, permission denied, busy)
// when the settings are invalid or the device cannot be opened now; it
// does not retry, so a wrong path is reported at once.
func Open(ctx context.Context, cfg Config, opts Options) (*Port, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	cfg.defaults()
	mode, _ := cfg.mode()
	p := &Port{cfg: cfg, mode: mode, clk: opts.Clock, log: opts.Log, open: opts.OpenFunc, notify: make(chan struct{}, 1)}
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

// Overflows counts the lines dropped, since Open, because the caller did
// not read them before Config.Buffer more arrived.
func (p *Port) Overflows() uint64 {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.overflow
}

// Buffered returns how many lines (and reported errors) wait to be read.
func (p *Port) Buffered() int {
	p.mu.Lock()
	defer p.mu.Unlock()
	return len(p.queue)
}

// openError says why the device at path could not be opened, in words of
// its own for each cause.
func (p *Port) openError(path string, err error) error {
	name := p.cfg.Port
	if path != name {
		name = fmt.Sprintf("%s (%s)", p.cfg.Port, path)
	}
	var pe *serial.PortError
	isPE := errors.As(err, &pe)
	switch {
	case errors.Is(err, fs.ErrNotExist):
		return fmt.Errorf("serial port %s: %w (is the adapter plugged in? ls /dev/serial/by-id lists those that are): %w", name, ErrNoDevice, err)
	case isPE && pe.Code() == serial.PermissionDenied, errors.Is(err, fs.ErrPermission):
		return fmt.Errorf("serial port %s: %w: this user may not open it (add the user to the group owning it, usually dialout: sudo usermod -aG dialout $USER, then log in again)", name, ErrPermission)
	case isPE && pe.Code() == serial.PortBusy, errors.Is(err, syscall.EBUSY):
		return fmt.Errorf("serial port %s: %w: another program has it open (close the terminal program or the other kermalux using it)", name, ErrBusy)
	}
	if st, serr := os.Stat(path); serr == nil {
		switch {
		case st.IsDir():
			return fmt.Errorf("serial port %s: %w: it is a directory (give the device in it, such as /dev/serial/by-id/usb-...)", name, ErrNotSerial)
		case st.Mode().IsRegular():
			return fmt.Errorf("serial port %s: %w: it is a regular file (expected a device such as /dev/ttyUSB0 or a /dev/serial/by-id link)", name, ErrNotSerial)
		case st.Mode()&os.ModeCharDevice == 0:
			return fmt.Errorf("serial port %s: %w: it is neither a terminal nor a serial adapter (%s)", name, ErrNotSerial, st.Mode().Type())
		}
	}
	if isPE && pe.Code() == serial.InvalidSerialPort {
		return fmt.Errorf("serial port %s: %w: the device does not accept serial settings (%w)", name, ErrNotSerial, err)
	}
	return fmt.Errorf("serial port %s: cannot open it: %w", name, err)
}

// reopen resolves the link and opens the device, discarding stale input,
// and starts the background reader.
func (p *Port) reopen() error {
	p.stopReader()
	p.mu.Lock()
	if p.closed {
		p.mu.Unlock()
		return fmt.Errorf("serial port %s: %w", p.cfg.Port, os.ErrClosed)
	}
	p.mu.Unlock()
	dev, err := filepath.EvalSymlinks(p.cfg.Port)
	if err != nil {
		return p.openError(p.cfg.Port, err)
	}
	sp, err := p.open(dev, p.mode)
	if err != nil {
		return p.openError(dev, err)
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
	rd := &reader{dev: sp, done: make(chan struct{})}
	p.mu.Lock()
	if p.closed {
		p.mu.Unlock()
		sp.Close()
		return fmt.Errorf("serial port %s: %w", p.cfg.Port, os.ErrClosed)
	}
	p.dev, p.rd = sp, rd
	p.queue, p.partial, p.skipping = p.queue[:0], p.partial[:0], false
	p.ack = p.epoch
	p.mu.Unlock()
	p.device = dev
	p.gen++
	p.marked = true
	p.down = false
	p.backoff = 0
	go p.readLoop(rd)
	return nil
}

// stopWait bounds how long closing waits for the background reader to end
// (it ends within one read slice unless the kernel holds its read).
const stopWait = 2 * time.Second

// stopReader ends the background reader and closes its device. It waits
// at most stopWait: a reader held in the kernel is left to end on its own
// (it drops whatever it reads then) rather than hanging the caller.
func (p *Port) stopReader() {
	p.mu.Lock()
	rd := p.rd
	p.rd, p.dev = nil, nil
	p.wakeFlush()
	p.mu.Unlock()
	if rd == nil {
		return
	}
	rd.stop.Store(true)
	closed := make(chan error, 1)
	go func() { closed <- rd.dev.Close() }()
	t := time.NewTimer(stopWait)
	defer t.Stop()
	select {
	case <-rd.done:
	case <-t.C:
		p.log.Warn("serial: the reader did not stop; leaving it", "port", p.cfg.Port, "waited", stopWait)
		return
	}
	select {
	case err := <-closed:
		if err != nil {
			p.log.Debug("serial: closing", "port", p.cfg.Port, "err", err)
		}
	case <-t.C:
		p.log.Warn("serial: closing the device did not finish", "port", p.cfg.Port, "waited", stopWait)
	}
}

// changedLocked tells those watching the reader (the tests, through
// WaitFor in export_test.go) that something changed. The caller holds p.mu.
func (p *Port) changedLocked() {
	if p.changed != nil {
		close(p.changed)
		p.changed = nil
	}
}

// wakeFlush releases a flush waiting for the reader. The caller holds p.mu.
func (p *Port) wakeFlush() {
	if p.flushed != nil {
		close(p.flushed)
		p.flushed = nil
	}
}

// fail marks the link down after err, closing the device.
func (p *Port) fail(err error) error {
	p.stopReader()
	p.mu.Lock()
	closed := p.closed
	p.queue, p.partial, p.skipping = p.queue[:0], p.partial[:0], false
	p.mu.Unlock()
	if closed {
		return fmt.Errorf("serial port %s: %w", p.cfg.Port, os.ErrClosed)
	}
	if !p.down {
		p.log.Warn("serial link lost", "port", p.cfg.Port, "device", p.device, "err", err)
		p.backoff = 0
		p.nextTry = 0
	}
	p.down = true
	return fmt.Errorf("serial port %s: %w (%w)", p.cfg.Port, drivers.ErrLinkDown, err)
}

// Ensure makes sure the link is open. While it is down, each call waits for
// the next reopen attempt (backoff from ReopenMin doubling to ReopenMax, on
// the Port's clock, ending early with ctx), tries once, and returns an error
// wrapping drivers.ErrLinkDown (and the reason the device cannot be
// opened) if it is still missing.
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
		if errors.Is(err, os.ErrClosed) {
			return err
		}
		return fmt.Errorf("%w: %w", drivers.ErrLinkDown, err)
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
	p.mu.Lock()
	dev := p.dev
	p.mu.Unlock()
	if dev == nil {
		return p.fail(errors.New("port not open"))
	}
	for len(b) > 0 {
		n, err := dev.Write(b)
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

// Flush discards input received but not yet read, in this Port's queue and
// in the operating system's. It waits (about one read slice, at most
// flushWait) until the background reader has emptied the device's input
// and begun a read after the call, so that nothing that arrived before the
// call is returned afterwards. A line that was in progress is dropped up
// to its end.
func (p *Port) Flush() {
	_ = p.FlushContext(context.Background())
}

// FlushContext is Flush ending early with ctx; it returns ctx's error, or
// an error when the reader did not take the flush within flushWait (the
// queue is emptied all the same).
func (p *Port) FlushContext(ctx context.Context) error {
	return p.flush(ctx, false)
}

// Discard drops input received but not yet read, like Flush, and also the
// rest of the line in progress even when the flush fell between two
// reads, so the next line returned is one that started after the call (a
// streaming meter's backlog is not passed on as fresh, and a line cut by
// the flush is not reported as garbled). When the flush happens to fall
// between two lines, the first whole line after it is dropped too: one
// reading lost is better than a garbled one.
func (p *Port) Discard() {
	_ = p.flush(context.Background(), true)
}

// flushWait bounds a flush's wait for the background reader.
const flushWait = 2 * time.Second

// flush asks the background reader to empty the device's input and waits
// until it has. Only the reader touches the device's input: emptying it
// from here while the reader sat between its poll (readable) and its read
// left that read blocked in the kernel with nothing to read, and the
// flush waiting for it for ever.
func (p *Port) flush(ctx context.Context, skip bool) error {
	p.mu.Lock()
	p.epoch++
	p.skipping = skip || p.skipping || len(p.partial) > 0
	p.queue, p.partial = p.queue[:0], p.partial[:0]
	p.spilling = false
	if p.rd == nil || p.rd.exited {
		p.ack = p.epoch
		p.mu.Unlock()
		return nil
	}
	if p.flushed == nil {
		p.flushed = make(chan struct{})
	}
	done := p.flushed
	p.mu.Unlock()
	t := time.NewTimer(flushWait)
	defer t.Stop()
	select {
	case <-done:
		return nil
	case <-ctx.Done():
		return fmt.Errorf("serial port %s: flushing input: %w", p.cfg.Port, ctx.Err())
	case <-t.C:
		p.log.Warn("serial: the reader did not take a flush", "port", p.cfg.Port, "waited", flushWait)
		return fmt.Errorf("serial port %s: flushing input: %w: the reader did not empty the input within %v", p.cfg.Port, drivers.ErrTimeout, flushWait)
	}
}

// minScaledTimeout is the least real time a scaled clock's timeout is cut
// to: how long a loaded host may take to schedule the reader, the meter's
// simulator and the caller is real time, whatever the clock's speed (at
// 20×, a KR-40's 1 s reply timeout would be 50 ms, and a CPU hog made
// healthy meters time out, their readings lost and exposures retaken).
const minScaledTimeout = 250 * time.Millisecond

// RealTimeout converts a duration of a meter's clock (a scaled clock in the
// demo) into the operating system's time for read timeouts. A clock that
// runs faster than real time shortens it, but not below minScaledTimeout
// (nor, for a shorter d, below d); a manual clock (which reports 0) keeps
// the duration as given.
func RealTimeout(c clock.Clock, d time.Duration) time.Duration {
	r := c.Real(d)
	if r <= 0 {
		return d
	}
	if floor := min(d, minScaledTimeout); r < floor {
		return floor
	}
	return r
}

// slice is the longest single read of the background reader, so that a
// flush or a close is honoured promptly.
const slice = 50 * time.Millisecond

// readLoop is the background reader: it reads the device until told to
// stop or the device fails, framing and stamping lines as they arrive.
func (p *Port) readLoop(rd *reader) {
	defer func() {
		p.mu.Lock()
		rd.exited = true
		if p.rd == rd || p.rd == nil {
			p.wakeFlush()
		}
		p.changedLocked()
		p.mu.Unlock()
		close(rd.done)
	}()
	buf := make([]byte, 4096)
	for !rd.stop.Load() {
		// A flush asked for: empty the device's input here, between two
		// reads, then tell the flush. What the read in progress at the
		// flush brought in was dropped below (its epoch is past).
		p.mu.Lock()
		ep := p.epoch
		reset := p.ack != ep
		p.mu.Unlock()
		if reset {
			if err := rd.dev.ResetInputBuffer(); err != nil {
				p.log.Debug("serial: cannot flush input", "port", p.cfg.Port, "err", err)
			}
			p.mu.Lock()
			p.ack = ep
			if p.epoch == ep && p.rd == rd {
				p.wakeFlush()
			}
			p.changedLocked()
			p.mu.Unlock()
		}
		if err := rd.dev.SetReadTimeout(slice); err != nil {
			p.gone(rd, fmt.Errorf("setting read timeout: %w", err))
			return
		}
		began := time.Now()
		n, err := rd.dev.Read(buf)
		mono, wall := p.clk.Mono(), p.clk.Now()
		if rd.stop.Load() {
			return
		}
		if err != nil {
			var pe *serial.PortError
			switch {
			case errors.Is(err, io.EOF):
				err = errors.New("end of file: device removed")
			case errors.As(err, &pe) && pe.Code() == serial.PortClosed:
				err = errors.New("device removed or port closed")
			}
			p.gone(rd, err)
			return
		}
		if n == 0 && time.Since(began) < slice/2 {
			// A timeout that came back far too early: the device is gone.
			p.gone(rd, errors.New("zero-byte read before the timeout: device removed"))
			return
		}
		if n == 0 {
			continue
		}
		p.mu.Lock()
		p.received += uint64(n)
		if p.epoch == ep && p.rd == rd {
			p.frame(buf[:n], mono, wall)
		}
		p.changedLocked()
		p.mu.Unlock()
	}
}

// gone queues the news that the device failed.
func (p *Port) gone(rd *reader, err error) {
	p.mu.Lock()
	if p.rd == rd {
		p.queue = append(p.queue, event{err: err, gone: true})
	}
	p.changedLocked()
	p.mu.Unlock()
	p.wake()
}

func (p *Port) wake() {
	select {
	case p.notify <- struct{}{}:
	default:
	}
}

// frame splits received bytes into lines, stamped mono and wall. The
// caller holds p.mu.
func (p *Port) frame(data []byte, mono time.Duration, wall time.Time) {
	pushed := false
	for _, c := range data {
		if c == p.term {
			if p.skipping {
				p.skipping = false
				p.partial = p.partial[:0]
				continue
			}
			line := p.partial
			switch p.cfg.ReceiveEnd {
			case CRLF, LF:
				if n := len(line); n > 0 && line[n-1] == '\r' {
					line = line[:n-1]
				}
			case CR:
				if len(line) > 0 && line[0] == '\n' {
					line = line[1:]
				}
			}
			if len(line) > p.cfg.MaxLine {
				p.push(event{err: fmt.Errorf("serial port %s: %w: line longer than %d bytes (expected lines ending in %s)", p.cfg.Port, drivers.ErrGarbled, p.cfg.MaxLine, p.cfg.ReceiveEnd)})
				pushed = true
			} else if len(line) > 0 { // blank lines (a CR LF pair split oddly) carry nothing
				p.push(event{line: Line{Text: string(line), Mono: mono, Wall: wall}})
				pushed = true
			}
			p.partial = p.partial[:0]
			continue
		}
		if p.skipping {
			continue
		}
		// One byte of slack: the CR of a CR LF end is not part of the line.
		if len(p.partial) > p.cfg.MaxLine {
			p.push(event{err: fmt.Errorf("serial port %s: %w: line longer than %d bytes (expected lines ending in %s; the rest of it is skipped)", p.cfg.Port, drivers.ErrGarbled, p.cfg.MaxLine, p.cfg.ReceiveEnd)})
			pushed = true
			p.partial = p.partial[:0]
			p.skipping = true
			continue
		}
		p.partial = append(p.partial, c)
	}
	if pushed {
		p.wake()
	}
}

// push appends an event, dropping the oldest line when the queue is full.
// The caller holds p.mu.
func (p *Port) push(e event) {
	if len(p.queue) >= p.cfg.Buffer {
		drop := 0
		for i, q := range p.queue { // keep errors: they are few and matter
			if q.err == nil {
				drop = i
				break
			}
		}
		p.queue = append(p.queue[:drop], p.queue[drop+1:]...)
		p.overflow++
		if !p.spilling {
			// A streaming meter fills the queue whenever nobody reads it
			// (at a prompt, between steps), and its readers drop that
			// backlog before they sample (drivers.Freshener): expected,
			// not a fault, so not a warning in the middle of what the
			// board says.
			p.spilling = true
			p.log.Debug("serial: lines arrive faster than they are read; dropping the oldest", "port", p.cfg.Port, "buffer", p.cfg.Buffer, "dropped", p.overflow)
		}
	}
	p.queue = append(p.queue, e)
}

// pop takes the oldest event. The caller holds p.mu.
func (p *Port) pop() (event, bool) {
	if len(p.queue) == 0 {
		p.spilling = false
		return event{}, false
	}
	e := p.queue[0]
	n := copy(p.queue, p.queue[1:])
	p.queue[n] = event{}
	p.queue = p.queue[:n]
	return e, true
}

// ReadLine returns the next complete line. It fails with drivers.ErrTimeout
// when no line ends within the read timeout, with the context's error when
// ctx ends first, with drivers.ErrGarbled for a line longer than MaxLine
// (reported once; the rest of it is skipped), and with drivers.ErrLinkDown
// when the device is gone.
func (p *Port) ReadLine(ctx context.Context) (Line, error) {
	return p.ReadLineTimeout(ctx, p.cfg.ReadTimeout)
}

// ReadLineTimeout is ReadLine with a timeout other than the configured one
// (real time). A deadline of ctx that comes before the timeout is not a
// timeout: the call returns ctx's error when ctx ends, never before.
func (p *Port) ReadLineTimeout(ctx context.Context, timeout time.Duration) (Line, error) {
	if err := p.Ensure(ctx); err != nil {
		return Line{}, err
	}
	start := time.Now()
	timer := time.NewTimer(timeout)
	defer timer.Stop()
	expired := false
	for {
		p.mu.Lock()
		e, ok := p.pop()
		p.mu.Unlock()
		if ok {
			switch {
			case e.gone:
				return Line{}, p.fail(e.err)
			case e.err != nil:
				return Line{}, e.err
			}
			l := e.line
			l.AfterReconnect = p.marked
			p.marked = false
			return l, nil
		}
		if err := ctx.Err(); err != nil {
			return Line{}, fmt.Errorf("serial port %s: waiting for a line: %w", p.cfg.Port, err)
		}
		if expired {
			return Line{}, p.timeout(timeout, time.Since(start))
		}
		select {
		case <-p.notify:
		case <-ctx.Done():
		case <-timer.C:
			expired = true
		}
	}
}

// timeout reports that no line came in waited (the timeout was limit),
// showing the line in progress, which is dropped.
func (p *Port) timeout(limit, waited time.Duration) error {
	p.mu.Lock()
	partial := ""
	if !p.skipping {
		partial = string(p.partial)
		p.partial = p.partial[:0]
	}
	p.mu.Unlock()
	w := waited.Round(time.Millisecond)
	if partial != "" {
		return fmt.Errorf("serial port %s: %w: no line end (%s) in %v (timeout %v) after the partial line %q", p.cfg.Port, drivers.ErrTimeout, p.cfg.ReceiveEnd, w, limit, partial)
	}
	return fmt.Errorf("serial port %s: %w: no line (ending in %s) in %v (timeout %v)", p.cfg.Port, drivers.ErrTimeout, p.cfg.ReceiveEnd, w, limit)
}

// Close closes the port; later calls fail with os.ErrClosed.
func (p *Port) Close() error {
	p.mu.Lock()
	if p.closed {
		p.mu.Unlock()
		return nil
	}
	p.closed = true
	p.mu.Unlock()
	p.stopReader()
	return nil
}
