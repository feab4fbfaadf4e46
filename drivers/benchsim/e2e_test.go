package benchsim

import (
	"context"
	"errors"
	"io"
	"log/slog"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"kermalux/drivers"
	"kermalux/drivers/clock"
	"kermalux/drivers/profile"
	"kermalux/drivers/scpi"
	"kermalux/drivers/serialline"
)

// End-to-end tests: the simulator on real pseudo-terminals, read by the
// real drivers (drivers/profile with testdata/profiles, drivers/scpi).

const profileDir = "../../testdata/profiles"

// e2eSpeed is the clock speed of these tests: fast, yet slow enough that
// the drivers' shortest real timeouts (tens of ms) hold on a busy machine.
const e2eSpeed = 10

var quietLog = slog.New(slog.NewTextHandler(io.Discard, nil))

type rig struct {
	b     *Bench
	clk   clock.Clock
	ports Ports
}

func startRig(t testing.TB, file string, speed float64, edit func(*Scenario)) *rig {
	t.Helper()
	s, err := LoadScenario(filepath.Join(scenarioDir, file))
	if err != nil {
		t.Fatal(err)
	}
	if edit != nil {
		edit(s)
	}
	clk := clock.NewScaled(speed, time.Date(2026, 3, 4, 9, 0, 0, 0, time.UTC))
	b, err := New(s, clk)
	if err != nil {
		t.Fatal(err)
	}
	ps, err := b.Serve(context.Background(), t.TempDir())
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { b.Close() })
	return &rig{b: b, clk: clk, ports: ps}
}

func openProfile(t testing.TB, r *rig, file, link, role string) *profile.Meter {
	t.Helper()
	p, err := profile.Load(filepath.Join(profileDir, file))
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	m, err := profile.Open(ctx, p, link, profile.Options{Name: role, Clock: r.clk, Log: quietLog})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { m.Close() })
	return m
}

func (r *rig) sleep(d time.Duration) { _ = r.clk.Sleep(context.Background(), d) }

// TestEndToEndReadings: readings through the real drivers agree with the
// model's truth (× the calibration error) within the configured noise.
func TestEndToEndReadings(t *testing.T) {
	r := startRig(t, "tollemby-rise-room2.yaml", e2eSpeed, nil)
	if fi, err := os.Lstat(r.ports.Dosimeter.Link); err != nil || fi.Mode()&os.ModeSymlink == 0 {
		t.Fatalf("link %s: %v", r.ports.Dosimeter.Link, err)
	}
	dose := openProfile(t, r, "veltrane-kr40.yaml", r.ports.Dosimeter.Link, RoleDosimeter)
	lum := openProfile(t, r, "vessoric-lm9.yaml", r.ports.Photometer.Link, RolePhotometer)
	ctx := context.Background()
	id, err := dose.Identify(ctx)
	if err != nil || id.Serial != "KR40-1187" || id.Firmware != "2.3" {
		t.Errorf("dosimeter identity %+v, %v", id, err)
	}
	r.b.SetBeam(true)
	// Keep reading the stream while waiting 4 s (10 brightness and 8
	// photometer time constants): a streaming meter's lines queue up.
	for start := r.b.Now(); r.b.Now() < start+4*time.Second; {
		if _, err := lum.Read(ctx); err != nil {
			t.Fatal(err)
		}
	}
	var ds, ls []float64
	for range 10 {
		d, err := dose.Read(ctx)
		if err != nil || !d.Usable() {
			t.Fatalf("dosimeter: %+v %v", d, err)
		}
		ds = append(ds, d.Value)
		l, err := lum.Read(ctx)
		if err != nil || !l.Usable() {
			t.Fatalf("photometer: %+v %v", l, err)
		}
		ls = append(ls, l.Value)
	}
	tr := r.b.Truth()
	// 5 % is more than ten times the configured noise (about 1 %).
	near(t, "dosimeter mean", mean(ds), tr.ChamberKermaRate*(1+tr.Dosimeter.CalibrationError), 0.05)
	near(t, "photometer mean", mean(ls), tr.PhotometerLuminance*(1+tr.Photometer.CalibrationError), 0.05)
	near(t, "G from the meters", (mean(ls)/(1+tr.Photometer.CalibrationError)-tr.DarkLuminance)/
		(mean(ds)/(1+tr.Dosimeter.CalibrationError)/tr.ChamberFactor), 152, 0.05)
}

// TestEndToEndSCPI: the Ondrakel DX-2 dialect through the SCPI driver, with
// pulsed fluoroscopy.
func TestEndToEndSCPI(t *testing.T) {
	r := startRig(t, "pelverton-pulsed-scpi.yaml", e2eSpeed, nil)
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	m, err := scpi.Open(ctx, r.ports.Dosimeter.Link, scpi.Config{}, scpi.WithClock(r.clk), scpi.WithName(RoleDosimeter), scpi.WithLogger(quietLog))
	if err != nil {
		t.Fatal(err)
	}
	defer m.Close()
	id, err := m.Identify(ctx)
	if err != nil || id.Maker != "ONDRAKEL" || id.Serial != "DX2-30417" {
		t.Errorf("identity %+v, %v", id, err)
	}
	r.b.SetBeam(true)
	r.sleep(5 * time.Second)
	var xs []float64
	// Step the sampling phase through the pulse period (1/15 s) so the
	// mean is not that of one phase: each read one period + 1/60 later.
	period := time.Second / 15
	for range 60 {
		r.sleep(period + period/60)
		rd, err := m.Read(ctx)
		if err != nil || !rd.Usable() {
			t.Fatalf("reading %+v: %v", rd, err)
		}
		xs = append(xs, rd.Value)
	}
	tr := r.b.Truth()
	// With a 50 ms response time the meter sees the 15 pulses/s ripple, so
	// the readings scatter between about 0.5 and 1.7 times the mean
	// (TestPulsedRipple's formula); the mean over phases is still the mean
	// rate. 15 % is about three standard errors of 60 such samples.
	near(t, "mean of pulsed readings", mean(xs), tr.ChamberKermaRate*(1+tr.Dosimeter.CalibrationError), 0.15)
	r.b.SetBeam(false)
	r.sleep(2 * time.Second)
	// Below its range the DX-2 prints SCPI's negative overflow with -222:
	// an under-range reading with no value, not a small number.
	rd, err := m.Read(ctx)
	if err != nil || rd.Status != drivers.StatusUnderRange || !rd.NoValue {
		t.Errorf("beam off: %+v %v, want under range with no value (range from %g µGy/s)", rd, err, tr.Dosimeter.Range.Min)
	}
}

// The project's SCPI driver against a meter that follows IEEE 488.2
// strictly (-410 for a reply left unread, -108 for a parameter where none
// is allowed, -109 for a missing one, -113 for an unknown header): over
// 100 readings and a reconnection the meter's error queue never holds an
// entry the driver caused, so every reading is usable.
func TestSCPIDriverAgainstStrictMeter(t *testing.T) {
	r := startRig(t, "pelverton-pulsed-scpi.yaml", e2eSpeed, nil)
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	m, err := scpi.Open(ctx, r.ports.Dosimeter.Link, scpi.Config{}, scpi.WithClock(r.clk), scpi.WithName(RoleDosimeter), scpi.WithLogger(quietLog))
	if err != nil {
		t.Fatal(err)
	}
	defer m.Close()
	if _, err := m.Identify(ctx); err != nil {
		t.Fatal(err)
	}
	r.b.SetBeam(true)
	r.sleep(3 * time.Second)
	for i := range 100 {
		rd, err := m.Read(ctx)
		if err != nil || !rd.Usable() || strings.Contains(rd.Raw, "|") {
			t.Fatalf("reading %d: %+v, %v", i, rd, err)
		}
		if i == 50 {
			if err := r.b.InjectFault(FaultSpec{Kind: FaultCablePulled, Meter: RoleDosimeter, Duration: time.Second}); err != nil {
				t.Fatal(err)
			}
			for {
				if _, err := m.Read(ctx); errors.Is(err, drivers.ErrLinkDown) {
					break
				}
			}
			for j := 0; ; j++ {
				rd, err = m.Read(ctx)
				if err == nil || !errors.Is(err, drivers.ErrLinkDown) || j > 200 {
					break
				}
			}
			if err != nil || !rd.AfterReconnect || !rd.Usable() {
				t.Fatalf("after the reconnection: %+v, %v", rd, err)
			}
		}
	}
}

func mean(xs []float64) float64 {
	s := 0.0
	for _, x := range xs {
		s += x
	}
	return s / float64(len(xs))
}

// TestEndToEndFaults: every fault kind surfaces at the client as the
// error or status the drivers promise.
func TestEndToEndFaults(t *testing.T) {
	type outcome struct {
		err    error          // wanted error (errors.Is), or nil
		status drivers.Status // wanted status when err is nil
	}
	for _, tc := range []struct {
		kind, role string
		want       outcome
	}{
		{FaultCablePulled, RolePhotometer, outcome{err: drivers.ErrLinkDown}},
		{FaultCablePulled, RoleDosimeter, outcome{err: drivers.ErrLinkDown}},
		{FaultStalled, RolePhotometer, outcome{err: drivers.ErrTimeout}},
		{FaultStalled, RoleDosimeter, outcome{err: drivers.ErrTimeout}},
		{FaultGarbage, RolePhotometer, outcome{err: drivers.ErrGarbled}},
		{FaultGarbage, RoleDosimeter, outcome{err: drivers.ErrGarbled}},
		{FaultOverRange, RolePhotometer, outcome{status: drivers.StatusOverRange}},
		{FaultOverRange, RoleDosimeter, outcome{status: drivers.StatusOverRange}},
		{FaultWrongUnit, RolePhotometer, outcome{err: drivers.ErrUnit}},
		{FaultWrongUnit, RoleDosimeter, outcome{err: drivers.ErrUnit}},
	} {
		t.Run(tc.kind+"/"+tc.role, func(t *testing.T) {
			t.Parallel()
			r := startRig(t, "tollemby-rise-room2.yaml", e2eSpeed, nil)
			var m drivers.Meter
			if tc.role == RoleDosimeter {
				m = openProfile(t, r, "veltrane-kr40.yaml", r.ports.Dosimeter.Link, RoleDosimeter)
			} else {
				m = openProfile(t, r, "vessoric-lm9.yaml", r.ports.Photometer.Link, RolePhotometer)
			}
			r.b.SetBeam(true)
			ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
			defer cancel()
			if _, err := m.Read(ctx); err != nil {
				t.Fatalf("before the fault: %v", err)
			}
			// The fault lasts long enough for several reads at the
			// drivers' shortest real timeout (250 ms, however fast the
			// scaled clock), so it surfaces as what it is, not only as a
			// timeout.
			const lasts = 12 * time.Second
			if err := r.b.InjectFault(FaultSpec{Kind: tc.kind, Meter: tc.role, Duration: lasts}); err != nil {
				t.Fatal(err)
			}
			end := r.b.Now() + lasts
			faultSeen, recovered, reconnectSeen := false, false, false
			var last error
			for ctx.Err() == nil && !(faultSeen && recovered) {
				rd, err := m.Read(ctx)
				switch {
				case tc.want.err != nil && errors.Is(err, tc.want.err):
					faultSeen = true
				case tc.want.err == nil && err == nil && rd.Status == tc.want.status:
					faultSeen = true
				case err == nil && rd.Usable() && r.b.Now() > end:
					recovered = faultSeen
					reconnectSeen = reconnectSeen || rd.AfterReconnect
				}
				if err != nil {
					last = err
				}
				if r.b.Now() > end+20*time.Second {
					break
				}
			}
			if !faultSeen {
				t.Fatalf("%s on the %s never surfaced as %+v (last error %v)", tc.kind, tc.role, tc.want, last)
			}
			if !recovered {
				t.Errorf("no good reading after the fault ended (last error %v)", last)
			}
			if tc.kind == FaultCablePulled && !reconnectSeen {
				t.Errorf("first reading after the re-plug not marked AfterReconnect")
			}
		})
	}
}

// TestCablePulledLink: during a pull the link is gone and the pty master
// closed; afterwards the link points at a new /dev/pts device.
func TestCablePulledLink(t *testing.T) {
	r := startRig(t, "tollemby-rise-room2.yaml", e2eSpeed, nil)
	before := r.ports.Photometer
	f, err := os.OpenFile(before.Link, os.O_RDWR, 0)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if err := r.b.InjectFault(FaultSpec{Kind: FaultCablePulled, Meter: RolePhotometer, Duration: 2 * time.Second}); err != nil {
		t.Fatal(err)
	}
	r.sleep(time.Second)
	if _, err := os.Lstat(before.Link); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("link still there during the pull: %v", err)
	}
	buf := make([]byte, 16)
	if n, err := f.Read(buf); err == nil && n > 0 {
		t.Errorf("read %d bytes from a pulled cable", n)
	}
	r.sleep(2 * time.Second)
	after := r.b.Ports().Photometer
	dev, err := filepath.EvalSymlinks(after.Link)
	if err != nil || dev != after.Device || after.Device == "" {
		t.Fatalf("link after re-plug resolves to %q (%v), port says %q", dev, err, after.Device)
	}
	// The new device answers.
	sp, err := serialline.Open(context.Background(), serialline.Config{Port: after.Link, Baud: 19200, ReadTimeout: time.Second}, serialline.Options{Clock: r.clk, Log: quietLog})
	if err != nil {
		t.Fatal(err)
	}
	defer sp.Close()
	if err := sp.WriteLine(context.Background(), "IDN"); err != nil {
		t.Fatal(err)
	}
	l, err := sp.ReadLine(context.Background())
	if err != nil || l.Text != "VESSORIC LM-9 #LM9-5521" {
		t.Errorf("after re-plug: %q %v", l.Text, err)
	}
}

// TestScenarioFaultAtBeamOn: a fault scheduled "at the Nth beam-on" starts
// then, not before.
func TestScenarioFaultAtBeamOn(t *testing.T) {
	s, err := LoadScenario(filepath.Join(scenarioDir, "fault-over-range.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	clk := clock.NewManual(time.Unix(0, 0))
	b, err := New(s, clk)
	if err != nil {
		t.Fatal(err)
	}
	b.SetBeam(true)
	clk.Advance(3 * time.Second)
	if len(b.Truth().ActiveFaults) != 0 {
		t.Fatal("fault active during the first beam-on")
	}
	b.SetBeam(false)
	clk.Advance(time.Second)
	b.SetBeam(true) // second beam-on: over range after 1 s for 4 s
	clk.Advance(500 * time.Millisecond)
	if len(b.Truth().ActiveFaults) != 0 {
		t.Fatal("fault active before its delay")
	}
	clk.Advance(time.Second)
	if f := b.Truth().ActiveFaults; len(f) != 1 || f[0].Kind != FaultOverRange {
		t.Fatalf("active faults %+v, want over range", f)
	}
	if d := b.display(RoleDosimeter); d.status != drivers.StatusOverRange || d.value != 500 {
		t.Errorf("display during the fault %+v, want over range at the 500 µGy/s limit", d)
	}
	clk.Advance(4 * time.Second)
	if len(b.Truth().ActiveFaults) != 0 {
		t.Fatal("fault outlived its duration")
	}
}

func TestServeLifecycle(t *testing.T) {
	s, err := LoadScenario(filepath.Join(scenarioDir, "tollemby-rise-room2.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	b, err := New(s, clock.NewScaled(e2eSpeed, time.Now()))
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	ps, err := b.Serve(context.Background(), dir)
	if err != nil {
		t.Fatal(err)
	}
	if ps.Dosimeter.Link != filepath.Join(dir, "by-id", "veltrane-KR40-1187") || ps.Photometer.Baud != 19200 || ps.Dosimeter.Baud != 9600 {
		t.Errorf("ports %+v", ps)
	}
	if _, err := b.Serve(context.Background(), dir); err == nil {
		t.Error("second Serve accepted")
	}
	if err := b.Close(); err != nil {
		t.Fatal(err)
	}
	if _, err := os.Lstat(ps.Dosimeter.Link); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("link left after Close: %v", err)
	}
	if err := b.Close(); err != nil {
		t.Errorf("second Close: %v", err)
	}
	if _, err := b.Serve(context.Background(), dir); err == nil {
		t.Error("Serve after Close accepted")
	}
	if err := b.InjectFault(FaultSpec{Kind: "flood", Meter: RoleDosimeter, Duration: time.Second}); err == nil {
		t.Error("unknown fault kind injected")
	}
}
