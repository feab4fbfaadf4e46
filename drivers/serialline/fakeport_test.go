package serialline_test

import (
	"context"
	"errors"
	"io"
	"os"
	"path/filepath"
	"testing"
	"time"

	"go.bug.st/serial"

	"kermalux/drivers"
	"kermalux/drivers/serialline"
)

// deadPort behaves like an unplugged adapter as the library might report
// it: reads return at once with the given result.
type deadPort struct {
	n   int
	err error
}

func (d *deadPort) SetMode(*serial.Mode) error  { return nil }
func (d *deadPort) Read(p []byte) (int, error)  { return d.n, d.err }
func (d *deadPort) Write(p []byte) (int, error) { return len(p), nil }
func (d *deadPort) Drain() error                { return nil }
func (d *deadPort) ResetInputBuffer() error     { return nil }
func (d *deadPort) ResetOutputBuffer() error    { return nil }
func (d *deadPort) SetDTR(bool) error           { return errors.New("inappropriate ioctl") }
func (d *deadPort) SetRTS(bool) error           { return errors.New("inappropriate ioctl") }
func (d *deadPort) GetModemStatusBits() (*serial.ModemStatusBits, error) {
	return nil, errors.New("no")
}
func (d *deadPort) SetReadTimeout(time.Duration) error { return nil }
func (d *deadPort) Close() error                       { return nil }
func (d *deadPort) Break(time.Duration) error          { return nil }

// TestDeadReads checks each way a removed device shows itself on Linux
// (design notes: an immediate zero-byte read, end of file, an I/O error)
// becomes ErrLinkDown at once, never a spin or a timeout.
func TestDeadReads(t *testing.T) {
	dev := filepath.Join(t.TempDir(), "ttyUSB0")
	if err := os.WriteFile(dev, nil, 0o600); err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct {
		name string
		port *deadPort
	}{
		{"zero bytes at once", &deadPort{}},
		{"end of file", &deadPort{err: io.EOF}},
		{"I/O error", &deadPort{err: errors.New("input/output error")}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			p, err := serialline.Open(context.Background(), serialline.Config{Port: dev, ReadTimeout: 5 * time.Second, ModemLines: true},
				serialline.Options{OpenFunc: func(string, *serial.Mode) (serial.Port, error) { return tc.port, nil }})
			if err != nil {
				t.Fatal(err)
			}
			start := time.Now()
			_, err = p.ReadLine(context.Background())
			if !errors.Is(err, drivers.ErrLinkDown) {
				t.Fatalf("got %v, want ErrLinkDown", err)
			}
			if time.Since(start) > 2*time.Second {
				t.Errorf("took %v: a dead device must be reported at once", time.Since(start))
			}
		})
	}
}
