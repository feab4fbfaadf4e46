// Package benchsim simulates an image-intensifier test bench: a fluoroscope
// whose beam a (simulated) operator switches, an air-kerma-rate meter at
// the intensifier input and a luminance meter at its output, each served
// on its own pseudo-terminal and speaking its wire protocol, with faults
// (pulled cable, stalled meter, garbage, over range, wrong unit) injected
// on a schedule.
//
// The physics lives in Model, a pure function of the scenario, the seed and
// the control calls; Bench wraps it with a clock, a lock and the serial
// ports. Everything here is invented for tests and demos: the simulated
// figures are not those of any real equipment.
package benchsim

import (
	"context"
	"errors"
	"fmt"
	"sync"
	"time"

	"kermalux/drivers/clock"
)

// Bench is a running simulated bench. All methods are safe for concurrent use.
type Bench struct {
	scn *Scenario
	clk clock.Clock

	mu     sync.Mutex
	model  *Model
	faults []*faultWindow

	serveMu sync.Mutex
	ports   []*port
	cancel  context.CancelFunc
	wg      sync.WaitGroup
	closed  bool
}

// faultWindow is a scheduled fault; start is known once it is triggered.
type faultWindow struct {
	spec      FaultSpec
	triggered bool
	start     time.Duration
}

// New builds a bench from a checked scenario (LoadScenario) on clk. Control
// calls are stamped with clk.Mono(); the bench's time 0 is clk.Mono() at
// New. Serve needs a clock whose Sleep really waits (NewReal or NewScaled).
func New(scn *Scenario, clk clock.Clock) (*Bench, error) {
	if clk == nil {
		return nil, errors.New("benchsim: a clock is needed")
	}
	m, err := NewModel(scn)
	if err != nil {
		return nil, err
	}
	b := &Bench{scn: scn, clk: clk, model: m}
	origin := clk.Mono()
	b.clk = offsetClock{Clock: clk, origin: origin}
	for _, f := range scn.Faults {
		w := &faultWindow{spec: f}
		if f.AtBeamOn == 0 {
			w.triggered, w.start = true, f.At
		}
		b.faults = append(b.faults, w)
	}
	return b, nil
}

// offsetClock makes the bench's time start at 0 when New is called.
type offsetClock struct {
	clock.Clock
	origin time.Duration
}

func (c offsetClock) Mono() time.Duration { return c.Clock.Mono() - c.origin }

// Scenario returns the bench's scenario (do not modify it).
func (b *Bench) Scenario() *Scenario { return b.scn }

// Now is the bench's simulated time since New.
func (b *Bench) Now() time.Duration { return b.clk.Mono() }

// SetBeam switches the beam on or off (the operator's foot on the pedal).
func (b *Bench) SetBeam(on bool) {
	b.mu.Lock()
	defer b.mu.Unlock()
	t := b.clk.Mono()
	b.model.advance(t) // act now, so the beam-on count is current
	n := b.model.SetBeam(t, on)
	if on {
		for _, w := range b.faults {
			if !w.triggered && w.spec.AtBeamOn == n {
				w.triggered, w.start = true, t+w.spec.After
			}
		}
	}
}

// SetFieldMode selects a field mode by name ("32cm").
func (b *Bench) SetFieldMode(name string) error {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.model.SetFieldMode(b.clk.Mono(), name)
}

// FieldModes lists the intensifier's field modes, largest first.
func (b *Bench) FieldModes() []string {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.model.ModeNames()
}

// SetLeadDisk places the lead disk at the centre of the input or removes it.
func (b *Bench) SetLeadDisk(in bool) {
	b.mu.Lock()
	defer b.mu.Unlock()
	b.model.SetLeadDisk(b.clk.Mono(), in)
}

// SetPhotometerPosition moves the photometer to rFrac of the output radius
// (0 centre, 1 edge) at angleDeg (0 right, 90 up, facing the output).
func (b *Bench) SetPhotometerPosition(rFrac, angleDeg float64) error {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.model.SetPhotometerPosition(b.clk.Mono(), rFrac, angleDeg)
}

// SetTubeVoltage sets the tube voltage in kV.
func (b *Bench) SetTubeVoltage(kv float64) error {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.model.SetTubeVoltage(b.clk.Mono(), kv)
}

// SetBrightnessControl switches the automatic brightness control on or
// off (manual mode). Off, the input kerma rate follows the tube voltage
// and the phantom; on, it is held at the field mode's rate.
func (b *Bench) SetBrightnessControl(on bool) {
	b.mu.Lock()
	defer b.mu.Unlock()
	b.model.SetBrightnessControl(b.clk.Mono(), on)
}

// SetPhantom puts the phantom or added filter into the beam, or removes it.
func (b *Bench) SetPhantom(in bool) {
	b.mu.Lock()
	defer b.mu.Unlock()
	b.model.SetPhantom(b.clk.Mono(), in)
}

// InjectFault schedules a fault now (At and AtBeamOn are ignored: it starts
// After from now). For the demo's operator and for tests.
func (b *Bench) InjectFault(f FaultSpec) error {
	f.At, f.AtBeamOn = 0, 0
	after := f.After
	f.After = 0
	if err := f.check("fault"); err != nil {
		var pe *pathError
		if errors.As(err, &pe) {
			return fmt.Errorf("benchsim: %s", pe.msg)
		}
		return err
	}
	b.mu.Lock()
	defer b.mu.Unlock()
	b.faults = append(b.faults, &faultWindow{spec: f, triggered: true, start: b.clk.Mono() + after})
	return nil
}

// Truth returns the answer key now.
func (b *Bench) Truth() Truth {
	b.mu.Lock()
	defer b.mu.Unlock()
	t := b.clk.Mono()
	tr := b.model.Truth(t)
	for _, w := range b.faults {
		if w.activeAt(t) {
			tr.ActiveFaults = append(tr.ActiveFaults, w.spec)
		}
	}
	return tr
}

func (w *faultWindow) activeAt(t time.Duration) bool {
	return w.triggered && t >= w.start && t < w.start+w.spec.Duration
}

// activeFault returns the fault of kind on role in force at t, if any.
// The caller holds b.mu.
func (b *Bench) activeFault(role, kind string, t time.Duration) (FaultSpec, bool) {
	for _, w := range b.faults {
		if w.spec.Meter == role && w.spec.Kind == kind && w.activeAt(t) {
			return w.spec, true
		}
	}
	return FaultSpec{}, false
}

// fault is activeFault with the lock taken.
func (b *Bench) fault(role, kind string) (FaultSpec, time.Duration, bool) {
	b.mu.Lock()
	defer b.mu.Unlock()
	t := b.clk.Mono()
	f, ok := b.activeFault(role, kind, t)
	return f, t, ok
}

// faultEnd returns when the fault of kind on role in force at t ends.
func (b *Bench) faultEnd(role, kind string, t time.Duration) time.Duration {
	b.mu.Lock()
	defer b.mu.Unlock()
	end := t
	for _, w := range b.faults {
		if w.spec.Meter == role && w.spec.Kind == kind && w.activeAt(t) {
			end = max(end, w.start+w.spec.Duration)
		}
	}
	return end
}

// Port is where one simulated meter can be reached.
type Port struct {
	Role     string // "dosimeter" or "photometer"
	Protocol string // "veltrane-kr40", "ondrakel-dx2", "vessoric-lm9"
	Name     string // link name under <dir>/by-id
	// Link is the stable path <dir>/by-id/<name>, a symlink to Device;
	// clients should open it (it survives a pulled cable).
	Link string
	// Device is the current /dev/pts/N; it changes after a pulled cable.
	Device string
	Baud   int
	// Terminator is the line ending the host must send ("\r" or "\n").
	Terminator string
}

// Ports are the bench's two meters.
type Ports struct {
	Dosimeter, Photometer Port
}

// Serve opens one pseudo-terminal per meter under dir (created if needed),
// publishes the stable links <dir>/by-id/<name> and serves the meters'
// protocols until ctx ends or Close is called. It returns at once.
func (b *Bench) Serve(ctx context.Context, dir string) (Ports, error) {
	b.serveMu.Lock()
	defer b.serveMu.Unlock()
	if b.closed {
		return Ports{}, errors.New("benchsim: bench is closed")
	}
	if b.ports != nil {
		return Ports{}, errors.New("benchsim: already serving")
	}
	ctx, cancel := context.WithCancel(ctx)
	var ports []*port
	for _, role := range []string{RoleDosimeter, RolePhotometer} {
		p, err := newPort(b, role, dir)
		if err != nil {
			cancel()
			for _, q := range ports {
				q.shutdown()
			}
			return Ports{}, err
		}
		ports = append(ports, p)
	}
	b.ports, b.cancel = ports, cancel
	for _, p := range ports {
		b.wg.Add(1)
		go func() {
			defer b.wg.Done()
			p.run(ctx)
		}()
	}
	return b.portsLocked(), nil
}

// Ports returns the meters' current ports (Device changes after a pulled
// cable; during the pull Device is empty).
func (b *Bench) Ports() Ports {
	b.serveMu.Lock()
	defer b.serveMu.Unlock()
	return b.portsLocked()
}

func (b *Bench) portsLocked() Ports {
	var ps Ports
	for _, p := range b.ports {
		if p.role == RoleDosimeter {
			ps.Dosimeter = p.info()
		} else {
			ps.Photometer = p.info()
		}
	}
	return ps
}

// Close stops serving, closes the pseudo-terminals and removes the links.
func (b *Bench) Close() error {
	b.serveMu.Lock()
	if b.closed {
		b.serveMu.Unlock()
		return nil
	}
	b.closed = true
	cancel := b.cancel
	ports := b.ports
	b.serveMu.Unlock()
	if cancel != nil {
		cancel()
	}
	b.wg.Wait()
	for _, p := range ports {
		p.shutdown()
	}
	return nil
}
