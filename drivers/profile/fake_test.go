package profile_test

import (
	"fmt"
	"io"
	"log/slog"
	"strings"
	"sync"
	"testing"
	"time"

	"kermalux/drivers/clock"
	"kermalux/drivers/profile"
	"kermalux/drivers/serialline/linetest"
)

// speed is how much faster than real time the tests' clock runs: the
// profiles' 1 s reply timeout becomes 100 ms of waiting.
const speed = 2

func testClock() clock.Clock {
	return clock.NewScaled(speed, time.Date(2026, 3, 4, 9, 0, 0, 0, time.UTC))
}

func quiet() *slog.Logger { return slog.New(slog.NewTextHandler(io.Discard, nil)) }

func load(t testing.TB, name string) *profile.Profile {
	t.Helper()
	p, err := profile.Load("../../testdata/profiles/" + name)
	if err != nil {
		t.Fatal(err)
	}
	return p
}

// kr40 is a fake polled dosimeter speaking the KR-40 protocol: commands
// end in CR, replies in CR LF.
type kr40 struct {
	mu     sync.Mutex
	unit   string // as printed: uGy/s, mR/s, mR/min
	reply  string // when set, the RD? reply verbatim (framing included)
	value  float64
	state  string // OK, OVR, UND, ERR
	mute   bool   // answer nothing (stalled meter)
	serial string // KR40-1187 when empty
}

func (k *kr40) set(f func(k *kr40)) {
	k.mu.Lock()
	f(k)
	k.mu.Unlock()
}

func (k *kr40) handle(d *linetest.Device, cmd string) {
	k.mu.Lock()
	defer k.mu.Unlock()
	if k.mute {
		return
	}
	switch {
	case cmd == "ID?":
		sn := k.serial
		if sn == "" {
			sn = "KR40-1187"
		}
		d.Send("VELTRANE KR-40 SN=" + sn + " FW=2.3\r\n")
	case cmd == "REMOTE":
		d.Send("OK\r\n")
	case strings.HasPrefix(cmd, "UNIT "):
		switch u := strings.TrimPrefix(cmd, "UNIT "); u {
		case "UGY/S":
			k.unit = "uGy/s"
		case "MR/S":
			k.unit = "mR/s"
		case "MR/MIN":
			k.unit = "mR/min"
		default:
			d.Send("ERR 10\r\n")
			return
		}
		d.Send("OK\r\n")
	case cmd == "RD?":
		if k.reply != "" {
			d.Send(k.reply)
			return
		}
		d.Send(fmt.Sprintf("RD %+.4E %s %s\r\n", k.value, k.unit, k.state))
	default:
		d.Send("ERR 10\r\n")
	}
}

func newKR40(t *testing.T) (*kr40, *linetest.Device) {
	k := &kr40{unit: "uGy/s", value: 0.1234, state: "OK"}
	return k, linetest.New(t, "veltrane-KR40-1187", '\r', k.handle)
}

// lm9 is a fake streaming photometer speaking the LM-9 protocol (LF).
type lm9 struct {
	mu      sync.Mutex
	line    string // the line streamed (without LF)
	rate    int    // lines per second of clock time; 0 = not streaming
	silent  bool   // keep streaming state but send nothing
	started int    // STREAM commands seen
	dev     *linetest.Device
	stop    chan struct{}
}

func (m *lm9) handle(d *linetest.Device, cmd string) {
	m.mu.Lock()
	defer m.mu.Unlock()
	switch {
	case cmd == "IDN":
		d.Send("VESSORIC LM-9 #LM9-5521\n")
	case strings.HasPrefix(cmd, "STREAM "):
		var n int
		if _, err := fmt.Sscanf(cmd, "STREAM %d", &n); err != nil || n < 1 || n > 50 {
			d.Send("ERR\n")
			return
		}
		m.rate = n
		m.started++
		d.Send("ACK\n")
	case cmd == "STOP":
		m.rate = 0
	}
}

// run streams until the test ends.
func (m *lm9) run(t *testing.T) {
	m.stop = make(chan struct{})
	t.Cleanup(func() { close(m.stop) })
	go func() {
		for {
			m.mu.Lock()
			rate, silent, line, d := m.rate, m.silent, m.line, m.dev
			m.mu.Unlock()
			wait := 10 * time.Millisecond
			if rate > 0 {
				wait = time.Second / time.Duration(rate) / speed
				if !silent {
					d.Send(line + "\n")
				}
			}
			select {
			case <-m.stop:
				return
			case <-time.After(wait):
			}
		}
	}()
}

func (m *lm9) set(f func(m *lm9)) {
	m.mu.Lock()
	f(m)
	m.mu.Unlock()
}

func newLM9(t *testing.T) (*lm9, *linetest.Device) {
	m := &lm9{line: "L 123,45 cd/m2 S0"}
	m.dev = linetest.New(t, "vessoric-LM9-5521", '\n', m.handle)
	m.run(t)
	return m, m.dev
}
