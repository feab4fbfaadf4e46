package demo

import (
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"time"
)

// HostLag is how much this process had to wait for a CPU while a demo ran.
// The demo runs the simulated meters in scaled real time over
// pseudo-terminals, so work the engine cannot do in time on a busy host
// lags the bench by speed × the delay: a reading period (100 ms) is 5 ms
// of real time at 20×. Readings then arrive late and bunched, and a
// machine running other work makes retakes and readings "not measurable"
// that a real bench, at 1×, would not have. HostLag lets the demo say so
// instead of leaving the engineer to blame the bench.
//
// It is read from Linux's per-thread scheduler statistics
// (/proc/self/task/*/schedstat: time on a CPU, then time runnable but
// waiting on a run queue, in nanoseconds; "schedstat" in the Linux
// kernel's Documentation/scheduler/sched-stats.rst); elsewhere Known is
// false.
type HostLag struct {
	Known bool
	CPU   time.Duration // the process's threads' time on a CPU
	Wait  time.Duration // their time runnable but waiting for a CPU
	Wall  time.Duration // the real time watched
	Speed float64       // the demo's clock speed
}

// Pressure is the simulated time the process's threads spent waiting for
// a CPU per second of real time: Wait / Wall × Speed. On an idle machine
// it is near 0; it grows with the host's other work and with the demo's
// speed, which is what turns a host's delay into the bench's.
func (l HostLag) Pressure() float64 {
	if !l.Known || l.Wall <= 0 {
		return 0
	}
	return l.Wait.Seconds() / l.Wall.Seconds() * l.Speed
}

// Busy reports whether the host kept the demo waiting enough to disturb
// the simulated meters: a pressure above 10 (at 20×, half a thread
// waiting all the time). The bound is this project's choice, from demos
// on this 2-core machine beside several test suites: at 20× a pressure
// of 25 left nine figures not measurable, 13 none; at 5× 4 to 6 none.
func (l HostLag) Busy() bool {
	return l.Pressure() > 10
}

// schedTotals sums the scheduler statistics of the process's threads.
func schedTotals() (cpu, wait time.Duration, ok bool) {
	files, _ := filepath.Glob("/proc/self/task/*/schedstat")
	for _, f := range files {
		b, err := os.ReadFile(f)
		if err != nil {
			continue // a thread that ended meanwhile
		}
		fields := strings.Fields(string(b))
		if len(fields) < 2 {
			continue
		}
		c, err1 := strconv.ParseInt(fields[0], 10, 64)
		w, err2 := strconv.ParseInt(fields[1], 10, 64)
		if err1 != nil || err2 != nil {
			continue
		}
		cpu += time.Duration(c)
		wait += time.Duration(w)
		ok = true
	}
	return cpu, wait, ok
}

// hostWatch measures HostLag from its start to Stop. Threads that end in
// between take their counts with them, so the figure is the living
// threads'; the Go runtime keeps its threads.
type hostWatch struct {
	cpu, wait time.Duration
	start     time.Time
	ok        bool
	speed     float64
}

func watchHost(speed float64) *hostWatch {
	c, w, ok := schedTotals()
	return &hostWatch{cpu: c, wait: w, start: time.Now(), ok: ok, speed: speed}
}

// Stop returns what was measured since the watch began.
func (h *hostWatch) Stop() HostLag {
	c, w, ok := schedTotals()
	l := HostLag{Wall: time.Since(h.start), Speed: h.speed}
	if ok && h.ok && c >= h.cpu && w >= h.wait {
		l.Known, l.CPU, l.Wait = true, c-h.cpu, w-h.wait
	}
	return l
}
