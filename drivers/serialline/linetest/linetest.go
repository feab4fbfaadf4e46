// Package linetest is a fake serial device for tests: a real
// pseudo-terminal pair whose slave is published behind a stable symlink
// (as /dev/serial/by-id does for USB adapters), with a tiny line-based
// meter on the master side, and the means to pull the cable (close the
// master, remove the link) and plug it back (a new pair, the link
// re-pointed).
package linetest

import (
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"sync"
	"syscall"
	"testing"
	"time"
	"unsafe"

	"github.com/creack/pty"
	"golang.org/x/term"
)

// Handler answers one command (without its line end) by calling f.Send.
// It runs on the device's goroutine.
type Handler func(f *Device, cmd string)

// Device is a fake serial device behind a symlink.
type Device struct {
	t       testing.TB
	link    string
	cmdEnd  byte
	handler Handler

	mu      sync.Mutex
	master  *os.File // non-blocking dup of the pty master
	tty     *os.File // held open so the master never reads EIO
	stop    chan struct{}
	done    chan struct{}
	cmds    []string
	last    string        // the previous slave's name
	changed chan struct{} // closed (and cleared) when a command comes in; made by a waiter
}

// New makes a device whose link is <t.TempDir()>/by-id/<name>. Commands
// end with cmdEnd ('\r' or '\n'); handler answers them. The device is
// closed at the end of the test.
func New(t testing.TB, name string, cmdEnd byte, handler Handler) *Device {
	t.Helper()
	dir := filepath.Join(t.TempDir(), "by-id")
	if err := os.MkdirAll(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	d := &Device{t: t, link: filepath.Join(dir, name), cmdEnd: cmdEnd, handler: handler}
	if err := d.plug(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(d.Pull)
	return d
}

// Link returns the stable path to open.
func (d *Device) Link() string { return d.link }

// Device returns the pty slave the link points to now.
func (d *Device) Device() string {
	p, _ := os.Readlink(d.link)
	return p
}

// Commands returns the commands received so far.
func (d *Device) Commands() []string {
	d.mu.Lock()
	defer d.mu.Unlock()
	return append([]string(nil), d.cmds...)
}

func (d *Device) plug() error {
	m, tty, err := pty.Open()
	if err != nil {
		return err
	}
	if tty.Name() == d.last {
		// The kernel reused the number; a re-plugged adapter usually gets
		// a new name, so take the next pair and free this one.
		m2, tty2, err := pty.Open()
		m.Close()
		tty.Close()
		if err != nil {
			return err
		}
		m, tty = m2, tty2
	}
	d.last = tty.Name()
	if _, err := term.MakeRaw(int(tty.Fd())); err != nil {
		m.Close()
		tty.Close()
		return err
	}
	fd, err := syscall.Dup(int(m.Fd()))
	if err != nil {
		return err
	}
	m.Close()
	if err := syscall.SetNonblock(fd, true); err != nil {
		return err
	}
	master := os.NewFile(uintptr(fd), "ptmx")
	os.Remove(d.link)
	if err := os.Symlink(tty.Name(), d.link); err != nil {
		master.Close()
		tty.Close()
		return err
	}
	d.mu.Lock()
	d.master, d.tty = master, tty
	d.stop, d.done = make(chan struct{}), make(chan struct{})
	stop, done := d.stop, d.done
	d.mu.Unlock()
	go d.serve(master, stop, done)
	return nil
}

func (d *Device) serve(master *os.File, stop, done chan struct{}) {
	defer close(done)
	buf := make([]byte, 512)
	var line []byte
	for {
		select {
		case <-stop:
			return
		default:
		}
		master.SetReadDeadline(time.Now().Add(20 * time.Millisecond))
		n, err := master.Read(buf)
		for _, c := range buf[:n] {
			if c == d.cmdEnd {
				cmd := string(line)
				line = line[:0]
				d.mu.Lock()
				d.cmds = append(d.cmds, cmd)
				d.mu.Unlock()
				if d.handler != nil {
					d.handler(d, cmd)
				}
				d.mu.Lock()
				if d.changed != nil {
					close(d.changed)
					d.changed = nil
				}
				d.mu.Unlock()
				continue
			}
			if c == '\r' || c == '\n' {
				continue
			}
			line = append(line, c)
		}
		if err != nil && !errors.Is(err, os.ErrDeadlineExceeded) {
			if errors.Is(err, os.ErrClosed) {
				return
			}
			// EIO while no client: look again shortly, or stop.
			t := time.NewTimer(5 * time.Millisecond)
			select {
			case <-stop:
				t.Stop()
				return
			case <-t.C:
			}
		}
	}
}

// WaitFor waits until cond holds, looking again each time the device
// receives a command (and answered it), or until ctx ends. cond may call
// the Device's methods.
func (d *Device) WaitFor(ctx context.Context, cond func() bool) error {
	for {
		d.mu.Lock()
		if d.changed == nil {
			d.changed = make(chan struct{})
		}
		ch := d.changed
		d.mu.Unlock()
		if cond() {
			return nil
		}
		select {
		case <-ch:
		case <-ctx.Done():
			return fmt.Errorf("linetest %s: waiting for the device: %w", d.link, ctx.Err())
		}
	}
}

// WaitCommands waits until the device has received at least n commands.
func (d *Device) WaitCommands(ctx context.Context, n int) error {
	return d.WaitFor(ctx, func() bool { return len(d.Commands()) >= n })
}

// Queued returns how many bytes wait in the client side's input queue
// (TIOCINQ on the pty slave): what Send wrote that the kernel has passed
// on and nobody has read yet.
func (d *Device) Queued() (int, error) {
	d.mu.Lock()
	tty := d.tty
	d.mu.Unlock()
	if tty == nil {
		return 0, fmt.Errorf("linetest %s: unplugged", d.link)
	}
	var n int32
	if _, _, e := syscall.Syscall(syscall.SYS_IOCTL, tty.Fd(), syscall.TIOCINQ, uintptr(unsafe.Pointer(&n))); e != 0 {
		return 0, fmt.Errorf("linetest %s: TIOCINQ: %w", d.link, e)
	}
	return int(n), nil
}

// WaitQueued waits until at least n bytes wait in the client side's input
// queue (the pty passes what the master wrote on asynchronously), or
// until ctx ends. The kernel gives no event for it, so it looks every
// millisecond.
func (d *Device) WaitQueued(ctx context.Context, n int) error {
	t := time.NewTicker(time.Millisecond)
	defer t.Stop()
	for {
		q, err := d.Queued()
		if err != nil {
			return err
		}
		if q >= n {
			return nil
		}
		select {
		case <-t.C:
		case <-ctx.Done():
			return fmt.Errorf("linetest %s: waiting for %d bytes queued (have %d): %w", d.link, n, q, ctx.Err())
		}
	}
}

// Send writes s to the client as is (add the line end yourself).
func (d *Device) Send(s string) {
	d.mu.Lock()
	m := d.master
	d.mu.Unlock()
	if m == nil {
		return
	}
	m.SetWriteDeadline(time.Now().Add(time.Second))
	m.Write([]byte(s))
}

// Pull simulates a pulled cable: the master is closed and the link removed.
func (d *Device) Pull() {
	d.mu.Lock()
	m, tty, stop, done := d.master, d.tty, d.stop, d.done
	d.master, d.tty = nil, nil
	d.mu.Unlock()
	if m == nil {
		return
	}
	close(stop)
	<-done
	os.Remove(d.link)
	m.Close()
	tty.Close()
}

// Replug makes a new pty pair and points the link at it.
func (d *Device) Replug() {
	d.t.Helper()
	if err := d.plug(); err != nil {
		d.t.Fatal(err)
	}
}
