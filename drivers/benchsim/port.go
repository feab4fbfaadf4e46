package benchsim

import (
	"context"
	"fmt"
	"log/slog"
	"math/rand/v2"
	"os"
	"path/filepath"
	"sync"
	"syscall"
	"time"
	"unsafe"

	"github.com/creack/pty"
	"golang.org/x/sys/unix"
)

// port serves one meter on a pseudo-terminal pair.
type port struct {
	b     *Bench
	role  string
	spec  MeterSpec
	link  string
	kick  chan struct{} // a command changed the stream: wake the loop
	dmu   sync.Mutex    // guards d
	d     dialect
	noise *rand.Rand // garbage bytes; used under dmu

	mu     sync.Mutex // guards the files
	master *os.File   // non-blocking dup of the pty master
	slave  *os.File   // held open so the master never sees "no client"
	device string
	done   chan struct{} // closed when the current reader ends
}

func newPort(b *Bench, role, dir string) (*port, error) {
	spec := b.scn.Dosimeter
	stream := uint64(1)
	if role == RolePhotometer {
		spec, stream = b.scn.Photometer, 2
	}
	byID := filepath.Join(dir, "by-id")
	if err := os.MkdirAll(byID, 0o755); err != nil {
		return nil, fmt.Errorf("benchsim: making %s: %w", byID, err)
	}
	p := &port{b: b, role: role, spec: spec, link: filepath.Join(byID, spec.LinkName),
		kick: make(chan struct{}, 1), d: newDialect(b, role, spec),
		noise: rand.New(rand.NewPCG(uint64(b.scn.Seed), 0x9a4b^stream))}
	if err := p.plug(); err != nil {
		return nil, err
	}
	return p, nil
}

func (p *port) info() Port {
	p.mu.Lock()
	defer p.mu.Unlock()
	return Port{Role: p.role, Protocol: p.spec.Protocol, Name: p.spec.LinkName, Link: p.link,
		Device: p.device, Baud: baudOf(p.spec.Protocol), Terminator: string(p.d.inEnd())}
}

// plug opens a new pty pair, sets it raw, points the link at it and starts
// reading commands.
func (p *port) plug() error {
	master, slave, err := openRawPTY()
	if err != nil {
		return fmt.Errorf("benchsim: opening a pseudo-terminal for the %s: %w", p.role, err)
	}
	tmp := p.link + ".new"
	_ = os.Remove(tmp)
	if err := os.Symlink(slave.Name(), tmp); err != nil {
		master.Close()
		slave.Close()
		return fmt.Errorf("benchsim: linking %s: %w", p.link, err)
	}
	if err := os.Rename(tmp, p.link); err != nil {
		master.Close()
		slave.Close()
		return fmt.Errorf("benchsim: linking %s: %w", p.link, err)
	}
	p.dmu.Lock()
	p.d.reset()
	p.dmu.Unlock()
	done := make(chan struct{})
	p.mu.Lock()
	p.master, p.slave, p.device, p.done = master, slave, slave.Name(), done
	p.mu.Unlock()
	go p.read(master, done)
	return nil
}

// unplug is the pulled cable: the master closes (the client's reads fail at
// once) and the link disappears.
func (p *port) unplug() {
	p.mu.Lock()
	master, slave, done := p.master, p.slave, p.done
	p.master, p.slave, p.device, p.done = nil, nil, "", nil
	p.mu.Unlock()
	if master == nil {
		return
	}
	_ = os.Remove(p.link)
	master.Close()
	slave.Close()
	<-done
}

func (p *port) shutdown() { p.unplug() }

// run serves the meter until ctx ends: it streams lines at the meter's
// rate and pulls and re-plugs the cable when a fault says so.
func (p *port) run(ctx context.Context) {
	clk := p.b.clk
	timer := time.NewTimer(time.Hour)
	defer timer.Stop()
	const idle = 250 * time.Millisecond // simulated; bounds fault latency
	var next time.Duration
	streaming := false
	for ctx.Err() == nil {
		now := clk.Mono()
		if _, t, ok := p.b.fault(p.role, FaultCablePulled); ok {
			p.unplug()
			end := p.b.faultEnd(p.role, FaultCablePulled, t)
			if clk.Sleep(ctx, end-t) != nil {
				return
			}
			if err := p.plug(); err != nil {
				slog.Error("benchsim: re-plugging failed", "meter", p.role, "err", err)
				return
			}
			streaming = false
			continue
		}
		p.dmu.Lock()
		period := p.d.streamPeriod()
		p.dmu.Unlock()
		wait := idle
		if period > 0 {
			if !streaming {
				streaming, next = true, now
			}
			if now >= next {
				p.dmu.Lock()
				line := p.d.streamLine()
				p.dmu.Unlock()
				p.send(line)
				next += period
				if next < now-period { // fell far behind: do not burst
					next = now + period
				}
			}
			wait = min(idle, next-clk.Mono())
		} else {
			streaming = false
		}
		if wait > 0 {
			timer.Reset(max(clk.Real(wait), 100*time.Microsecond))
			select {
			case <-ctx.Done():
				return
			case <-p.kick:
			case <-timer.C:
			}
			if !timer.Stop() {
				select {
				case <-timer.C:
				default:
				}
			}
		}
	}
}

// read collects command lines from the master and answers them.
func (p *port) read(f *os.File, done chan struct{}) {
	defer close(done)
	buf := make([]byte, 512)
	line := make([]byte, 0, 128)
	end := p.d.inEnd()
	other := byte('\n')
	if end == '\n' {
		other = '\r'
	}
	overrun := false
	type received struct {
		cmd     string
		overrun bool
	}
	var got []received
	for {
		n, err := f.Read(buf)
		got = got[:0]
		for _, c := range buf[:n] {
			switch {
			case c == end:
				got = append(got, received{string(line), overrun})
				line, overrun = line[:0], false
			case c == other:
			case len(line) < maxCommand:
				line = append(line, c)
			default:
				overrun = true // the input buffer is full: the rest is lost
			}
		}
		// Commands that came in together were all sent before any reply
		// to the first of them existed: a reply followed by another
		// command of the same read was never read by the host.
		replyHeld := false
		for i, r := range got {
			if r.overrun {
				p.overrun()
				continue
			}
			replyHeld = p.handle(r.cmd, replyHeld, i < len(got)-1)
		}
		if err != nil {
			// Closed by unplug or shutdown. (EIO, "no client", cannot
			// happen: the simulator holds the slave side open itself.)
			return
		}
	}
}

// overrun answers a command that did not fit the meter's input buffer.
func (p *port) overrun() {
	if _, _, ok := p.b.fault(p.role, FaultStalled); ok {
		return
	}
	p.dmu.Lock()
	replies := p.d.overrun()
	p.dmu.Unlock()
	for _, r := range replies {
		p.send(r)
	}
}

// handle answers one command. unreadReply says the previous command's
// reply was held back because this command came with it (the host cannot
// have read it); more says another command follows in the same read, so
// a reply to this one is held back in turn. It reports whether it held a
// reply back. Only an interrupter dialect holds replies back.
func (p *port) handle(cmd string, unreadReply, more bool) (replyHeld bool) {
	if _, _, ok := p.b.fault(p.role, FaultStalled); ok {
		return false // a stalled meter ignores what it is sent
	}
	if !p.lineMatches() {
		// At another speed or framing the meter cannot make out the
		// command; what it sends back reaches the host as noise.
		p.sendNoise()
		return false
	}
	p.dmu.Lock()
	in, interrupts := p.d.(interrupter)
	if interrupts && (unreadReply || p.unread() > 0) {
		// A new message while the last reply is unread: the reply is
		// thrown away and the meter says so (IEEE 488.2, 6.3.2.3).
		p.flushUnread()
		in.interrupted()
	}
	was := p.d.streamPeriod()
	replies := p.d.command(cmd)
	now := p.d.streamPeriod()
	p.dmu.Unlock()
	if interrupts && more && len(replies) > 0 {
		replyHeld = true
		replies = nil
	}
	for _, r := range replies {
		p.send(r)
	}
	if now != was {
		select {
		case p.kick <- struct{}{}:
		default:
		}
	}
	return replyHeld
}

// send writes one line, unless the meter is stalled; during a garbage
// fault the line is replaced by random bytes or a torn-off part of it.
func (p *port) send(line string) {
	if _, _, ok := p.b.fault(p.role, FaultStalled); ok {
		return
	}
	out := line + p.d.outEnd()
	if _, _, ok := p.b.fault(p.role, FaultGarbage); ok {
		out = p.garble(line)
	}
	if !p.lineMatches() {
		out = p.noiseBytes(len(out))
	}
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.master == nil {
		return
	}
	// Nobody reading: the line is dropped rather than blocking the meter.
	_ = p.master.SetWriteDeadline(time.Now().Add(200 * time.Millisecond))
	_, _ = p.master.Write([]byte(out))
}

// garble makes line noise: random bytes (never a valid reply) ended by the
// meter's line end, or the first part of the real line with no end.
func (p *port) garble(line string) string {
	p.dmu.Lock()
	defer p.dmu.Unlock()
	if p.noise.IntN(3) == 0 && len(line) > 2 {
		return line[:1+p.noise.IntN(len(line)-1)]
	}
	n := 4 + p.noise.IntN(24)
	b := make([]byte, 0, n+2)
	b = append(b, '#', 0xff) // a meter never starts a line so
	for range n {
		c := byte(p.noise.IntN(256))
		if c == '\r' || c == '\n' {
			c = '?'
		}
		b = append(b, c)
	}
	return string(b) + p.d.outEnd()
}

// openRawPTY opens a pty pair, sets the line raw (no echo, no line
// discipline, no CR/LF translation) and returns a non-blocking dup of the
// master, so reads and writes honour deadlines and Close unblocks them.
func openRawPTY() (master, slave *os.File, err error) {
	m, s, err := pty.Open()
	if err != nil {
		return nil, nil, err
	}
	defer m.Close()
	if err := makeRaw(s.Fd()); err != nil {
		s.Close()
		return nil, nil, fmt.Errorf("setting %s raw: %w", s.Name(), err)
	}
	fd, err := syscall.Dup(int(m.Fd()))
	if err != nil {
		s.Close()
		return nil, nil, fmt.Errorf("dup of pty master: %w", err)
	}
	syscall.CloseOnExec(fd)
	if err := syscall.SetNonblock(fd, true); err != nil {
		syscall.Close(fd)
		s.Close()
		return nil, nil, fmt.Errorf("pty master non-blocking: %w", err)
	}
	return os.NewFile(uintptr(fd), "ptmx:"+s.Name()), s, nil
}

// makeRaw is cfmakeraw(3) on fd.
func makeRaw(fd uintptr) error {
	var t syscall.Termios
	if _, _, e := syscall.Syscall(syscall.SYS_IOCTL, fd, syscall.TCGETS, uintptr(unsafe.Pointer(&t))); e != 0 {
		return e
	}
	t.Iflag &^= syscall.IGNBRK | syscall.BRKINT | syscall.PARMRK | syscall.ISTRIP | syscall.INLCR | syscall.IGNCR | syscall.ICRNL | syscall.IXON
	t.Oflag &^= syscall.OPOST
	t.Lflag &^= syscall.ECHO | syscall.ECHONL | syscall.ICANON | syscall.ISIG | syscall.IEXTEN
	t.Cflag &^= syscall.CSIZE | syscall.PARENB
	t.Cflag |= syscall.CS8
	t.Cc[syscall.VMIN] = 1
	t.Cc[syscall.VTIME] = 0
	if _, _, e := syscall.Syscall(syscall.SYS_IOCTL, fd, syscall.TCSETS, uintptr(unsafe.Pointer(&t))); e != 0 {
		return e
	}
	return nil
}

// lineMatches reports whether the host set the line as the meter's: the
// speed and the character frame (8 data bits, no parity, 1 stop bit) the
// client set on its end of the pseudo-terminal, read from the slave,
// which the simulator holds open. A speed that cannot be told (a
// non-standard rate) is taken as matching.
func (p *port) lineMatches() bool {
	p.mu.Lock()
	slave := p.slave
	p.mu.Unlock()
	if slave == nil {
		return true
	}
	t, err := unix.IoctlGetTermios(int(slave.Fd()), unix.TCGETS)
	if err != nil {
		return true
	}
	baud, known := termiosBaud(t.Cflag)
	if known && baud != baudOf(p.spec.Protocol) {
		return false
	}
	return t.Cflag&unix.CSIZE == unix.CS8 && t.Cflag&unix.PARENB == 0 && t.Cflag&unix.CSTOPB == 0
}

// termiosBaud decodes the speed bits of a termios c_cflag (Linux CBAUD).
func termiosBaud(cflag uint32) (int, bool) {
	switch cflag & unix.CBAUD {
	case unix.B1200:
		return 1200, true
	case unix.B2400:
		return 2400, true
	case unix.B4800:
		return 4800, true
	case unix.B9600:
		return 9600, true
	case unix.B19200:
		return 19200, true
	case unix.B38400:
		return 38400, true
	case unix.B57600:
		return 57600, true
	case unix.B115200:
		return 115200, true
	case unix.B230400:
		return 230400, true
	}
	return 0, false
}

// unread is how many bytes the meter sent that the host has not read
// (the slave's input queue).
func (p *port) unread() int {
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.slave == nil {
		return 0
	}
	n, err := unix.IoctlGetInt(int(p.slave.Fd()), unix.TIOCINQ)
	if err != nil {
		return 0
	}
	return n
}

// flushUnread throws away what the host has not read (TCFLSH, TCIFLUSH on
// the slave).
func (p *port) flushUnread() {
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.slave != nil {
		_ = unix.IoctlSetInt(int(p.slave.Fd()), unix.TCFLSH, unix.TCIFLUSH)
	}
}

// noise is what n bytes sent at another speed look like at the far end:
// bytes with the high bit set mostly, and no line end.
func (p *port) noiseBytes(n int) string {
	p.dmu.Lock()
	defer p.dmu.Unlock()
	b := make([]byte, max(2, n/2+p.noise.IntN(n+1)))
	for i := range b {
		c := byte(p.noise.IntN(256)) | 0x80
		if p.noise.IntN(4) == 0 {
			c &^= 0x80
		}
		if c == '\r' || c == '\n' {
			c = 0xfe
		}
		b[i] = c
	}
	return string(b)
}

func (p *port) sendNoise() {
	out := p.noiseBytes(8 + len(p.role))
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.master == nil {
		return
	}
	_ = p.master.SetWriteDeadline(time.Now().Add(200 * time.Millisecond))
	_, _ = p.master.Write([]byte(out))
}
