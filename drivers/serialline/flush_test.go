package serialline_test

import (
	"context"
	"errors"
	"os"
	"path/filepath"
	"sync"
	"testing"
	"time"

	"go.bug.st/serial"

	"kermalux/drivers/serialline"
)

// kernelPort reads as go.bug.st/serial v1.8.0 does on Linux
// (serial_unix.go, Read): it waits, up to the read timeout, until the
// device has input (select), then reads it with a blocking read(2) on a
// blocking descriptor, and Close waits for a read in progress to end.
// Input emptied between the select and the read (TCIFLUSH from another
// goroutine) leaves the read held in the kernel until more input comes.
type kernelPort struct {
	mu       sync.Mutex
	inRead   chan struct{} // closed when a read first begins
	rdOnce   sync.Once
	in       []byte
	arrived  chan struct{} // a token when input arrives
	closing  chan struct{}
	timeout  time.Duration
	reading  bool
	underRd  int           // inputs emptied while a read was in progress
	selected chan struct{} // closed when a select first finds input
	selOnce  sync.Once
	emptied  chan struct{} // closed at the first ResetInputBuffer after selected
	empOnce  sync.Once
	reads    sync.WaitGroup
	// hold, when set, keeps every read in the kernel until input comes
	// (a read that is stuck whatever the reader asks).
	hold bool
}

func newKernelPort() *kernelPort {
	return &kernelPort{arrived: make(chan struct{}, 1), closing: make(chan struct{}), timeout: 50 * time.Millisecond,
		selected: make(chan struct{}), emptied: make(chan struct{}), inRead: make(chan struct{})}
}

// deliver is the meter sending s.
func (k *kernelPort) deliver(s string) {
	k.mu.Lock()
	k.in = append(k.in, s...)
	k.mu.Unlock()
	select {
	case k.arrived <- struct{}{}:
	default:
	}
}

func (k *kernelPort) take(p []byte) int {
	k.mu.Lock()
	defer k.mu.Unlock()
	n := copy(p, k.in)
	k.in = k.in[n:]
	return n
}

func (k *kernelPort) has() bool {
	k.mu.Lock()
	defer k.mu.Unlock()
	return len(k.in) > 0
}

func (k *kernelPort) Read(p []byte) (int, error) {
	k.reads.Add(1)
	defer k.reads.Done()
	k.rdOnce.Do(func() { close(k.inRead) })
	k.mu.Lock()
	k.reading = true
	hold := k.hold
	k.mu.Unlock()
	defer func() {
		k.mu.Lock()
		k.reading = false
		k.mu.Unlock()
	}()
	if !hold {
		// select(2) with the read timeout.
		t := time.NewTimer(k.timeout)
		defer t.Stop()
		for !k.has() {
			select {
			case <-k.arrived:
			case <-k.closing:
				return 0, os.ErrClosed
			case <-t.C:
				return 0, nil
			}
		}
		// Readable. The time between select and read is short but not
		// nil: here, the first time, it lasts until input is emptied or
		// half a second has passed.
		first := false
		k.selOnce.Do(func() { close(k.selected); first = true })
		if first {
			gap := time.NewTimer(500 * time.Millisecond)
			select {
			case <-k.emptied:
			case <-gap.C:
			}
			gap.Stop()
		}
	}
	// read(2) on a blocking descriptor: nothing wakes it but input.
	for {
		if n := k.take(p); n > 0 {
			return n, nil
		}
		<-k.arrived
	}
}

func (k *kernelPort) ResetInputBuffer() error {
	k.mu.Lock()
	if k.reading {
		k.underRd++
	}
	k.in = nil
	k.mu.Unlock()
	select {
	case <-k.selected: // input emptied after a select found some
		k.empOnce.Do(func() { close(k.emptied) })
	default:
	}
	return nil
}

func (k *kernelPort) Close() error {
	close(k.closing)
	k.reads.Wait() // closeLock: a read in progress ends first
	return nil
}

func (k *kernelPort) SetReadTimeout(d time.Duration) error {
	k.mu.Lock()
	k.timeout = d
	k.mu.Unlock()
	return nil
}
func (k *kernelPort) SetMode(*serial.Mode) error  { return nil }
func (k *kernelPort) Write(p []byte) (int, error) { return len(p), nil }
func (k *kernelPort) Drain() error                { return nil }
func (k *kernelPort) ResetOutputBuffer() error    { return nil }
func (k *kernelPort) SetDTR(bool) error           { return nil }
func (k *kernelPort) SetRTS(bool) error           { return nil }
func (k *kernelPort) GetModemStatusBits() (*serial.ModemStatusBits, error) {
	return &serial.ModemStatusBits{}, nil
}
func (k *kernelPort) Break(time.Duration) error { return nil }

func openKernelPort(t *testing.T, k *kernelPort) *serialline.Port {
	t.Helper()
	dev := filepath.Join(t.TempDir(), "ttyUSB0")
	if err := os.WriteFile(dev, nil, 0o600); err != nil {
		t.Fatal(err)
	}
	p, err := serialline.Open(context.Background(), serialline.Config{Port: dev, ReadTimeout: time.Second},
		serialline.Options{OpenFunc: func(string, *serial.Mode) (serial.Port, error) { return k, nil }})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { p.Close() })
	// Runs before the Close above: a read the old code left in the
	// kernel gets input and ends, so the test fails rather than hangs.
	t.Cleanup(func() { k.deliver("\n") })
	return p
}

// A flush that falls while the background reader has found input and not
// yet read it must not leave the reader blocked in the kernel and the
// flush waiting for it for ever (seen in the stack dump of a hung demo: a
// polled meter flushed after a late reply, and sent nothing more since it
// was never asked again). Only the reader empties the device's input,
// between two reads.
func TestFlushBetweenSelectAndRead(t *testing.T) {
	k := newKernelPort()
	p := openKernelPort(t, k)
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	k.deliver("L 1,00 cd/m2 S0\n") // a late reply
	select {
	case <-k.selected:
	case <-ctx.Done():
		t.Fatal("the reader never looked for input")
	}
	flushed := make(chan struct{})
	go func() {
		p.Flush() // as a polled dialect does after an error
		close(flushed)
	}()
	select {
	case <-flushed:
	case <-ctx.Done():
		t.Fatal("Flush still waiting after 10 s: the reader is blocked in a read of input the flush emptied")
	}
	k.mu.Lock()
	under := k.underRd
	k.mu.Unlock()
	if under > 0 {
		t.Errorf("input emptied %d times while a read was in progress", under)
	}
	k.deliver("L 2,00 cd/m2 S0\n")
	l, err := p.ReadLine(ctx)
	if err != nil || l.Text != "L 2,00 cd/m2 S0" {
		t.Fatalf("after the flush: %q, %v; want the line sent after it", l.Text, err)
	}
}

// A flush and a close whose reader is held in the kernel (whatever the
// cause) end: the flush with the context, the close within its bound.
func TestFlushAndCloseEndWithAStuckReader(t *testing.T) {
	k := newKernelPort()
	k.hold = true
	p := openKernelPort(t, k)
	select {
	case <-k.inRead:
	case <-time.After(10 * time.Second):
		t.Fatal("the reader never read")
	}
	ctx, cancel := context.WithTimeout(context.Background(), 100*time.Millisecond)
	defer cancel()
	if err := p.FlushContext(ctx); !errors.Is(err, context.DeadlineExceeded) {
		t.Errorf("flush with a stuck reader: %v, want the context's deadline", err)
	}
	closed := make(chan struct{})
	go func() {
		p.Close()
		close(closed)
	}()
	wait, stop := context.WithTimeout(context.Background(), 20*time.Second)
	defer stop()
	select {
	case <-closed:
	case <-wait.Done():
		t.Fatal("Close still waiting after 20 s for a reader held in the kernel")
	}
}
