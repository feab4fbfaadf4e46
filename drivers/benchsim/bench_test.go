package benchsim

import (
	"bufio"
	"context"
	"os"
	"path/filepath"
	"runtime"
	"sync"
	"sync/atomic"
	"syscall"
	"testing"
	"time"

	"kermalux/drivers/profile"
)

// benchSpeed runs 60 s of simulated time in 6 s of real time.
const benchSpeed = 10

// cpuTime is this process's user + system CPU time so far.
func cpuTime(b *testing.B) time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		b.Fatal(err)
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// BenchmarkTwoMeters50Hz reads the dosimeter (polled) and the photometer
// (streaming) at 50 Hz each for 60 s of simulated time over ptys, and
// reports CPU time and allocations per reading for the whole process
// (simulator and client). "drivers" reads with drivers/profile; "raw",
// the baseline in the same run, reads the same lines with a bare
// bufio.Reader, so the difference is the drivers' share.
// Target: below 250 µs CPU per reading (1 % of a core at 2 × 20 Hz).
func BenchmarkTwoMeters50Hz(b *testing.B) {
	for _, mode := range []string{"raw", "drivers"} {
		b.Run(mode, func(b *testing.B) {
			var readings atomic.Int64
			var ms0, ms1 runtime.MemStats
			runtime.ReadMemStats(&ms0)
			cpu0 := cpuTime(b)
			for range b.N {
				r := startRig(b, "tollemby-rise-room2.yaml", benchSpeed, nil)
				r.b.SetBeam(true)
				ctx, cancel := context.WithCancel(context.Background())
				var wg sync.WaitGroup
				end := r.b.Now() + 60*time.Second
				for _, role := range []string{RoleDosimeter, RolePhotometer} {
					wg.Add(1)
					go func() {
						defer wg.Done()
						var n int64
						if mode == "raw" {
							n = readRaw(ctx, b, r, role, end)
						} else {
							n = readDrivers(ctx, b, r, role, end)
						}
						readings.Add(n)
					}()
				}
				wg.Wait()
				cancel()
				r.b.Close()
			}
			cpu := cpuTime(b) - cpu0
			runtime.ReadMemStats(&ms1)
			n := float64(readings.Load())
			b.ReportMetric(float64(cpu.Microseconds())/n, "cpu-µs/reading")
			b.ReportMetric(float64(ms1.Mallocs-ms0.Mallocs)/n, "allocs/reading")
			b.ReportMetric(n/float64(b.N), "readings/op")
		})
	}
}

// readDrivers reads one meter with the real profile driver until end.
func readDrivers(ctx context.Context, b *testing.B, r *rig, role string, end time.Duration) int64 {
	file, link := "veltrane-kr40.yaml", r.ports.Dosimeter.Link
	if role == RolePhotometer {
		file, link = "vessoric-lm9.yaml", r.ports.Photometer.Link
	}
	p, err := profile.Load(filepath.Join(profileDir, file))
	if err != nil {
		b.Error(err)
		return 0
	}
	p.Start.Send, p.Period = "STREAM 50", 20*time.Millisecond
	m, err := profile.Open(ctx, p, link, profile.Options{Name: role, Clock: r.clk, Log: quietLog})
	if err != nil {
		b.Error(err)
		return 0
	}
	defer m.Close()
	var n int64
	next := r.clk.Mono()
	for r.b.Now() < end {
		if role == RoleDosimeter { // polled: pace the queries at 50 Hz
			next += 20 * time.Millisecond
			_ = r.clk.Sleep(ctx, next-r.clk.Mono())
		}
		if _, err := m.Read(ctx); err == nil {
			n++
		}
	}
	return n
}

// readRaw reads one meter's lines with a bare reader (the baseline).
func readRaw(ctx context.Context, b *testing.B, r *rig, role string, end time.Duration) int64 {
	link, cmd, term := r.ports.Dosimeter.Link, "RD?\r", byte('\n')
	if role == RolePhotometer {
		link, cmd = r.ports.Photometer.Link, "STREAM 50\n"
	}
	f, err := os.OpenFile(link, os.O_RDWR|syscall.O_NOCTTY, 0)
	if err != nil {
		b.Error(err)
		return 0
	}
	defer f.Close()
	br := bufio.NewReader(f)
	var n int64
	next := r.clk.Mono()
	if role == RolePhotometer {
		f.WriteString(cmd)
	}
	for r.b.Now() < end {
		if role == RoleDosimeter {
			next += 20 * time.Millisecond
			_ = r.clk.Sleep(ctx, next-r.clk.Mono())
			f.WriteString(cmd)
		}
		f.SetReadDeadline(time.Now().Add(time.Second))
		if _, err := br.ReadSlice(term); err != nil {
			return n
		}
		n++
	}
	return n
}

// BenchmarkModelReading is the physics alone: one dosimeter and one
// photometer reading, 20 ms of simulated time apart.
func BenchmarkModelReading(b *testing.B) {
	for _, file := range []string{"tollemby-rise-room2.yaml", "pelverton-pulsed-scpi.yaml"} {
		b.Run(file, func(b *testing.B) {
			s, err := LoadScenario(filepath.Join(scenarioDir, file))
			if err != nil {
				b.Fatal(err)
			}
			m, _ := NewModel(s)
			m.SetBeam(0, true)
			b.ReportAllocs()
			b.ResetTimer()
			for i := range b.N {
				at := time.Duration(i) * 20 * time.Millisecond
				m.DoseReading(at)
				m.LumReading(at)
			}
		})
	}
}
