package demo

import (
	"os"
	"runtime"
	"sync"
	"testing"
	"time"
)

// TestWatchHostSeesWaiting runs more busy threads than the machine has
// CPUs, so that the kernel must keep some of them waiting, and checks that
// the watch reads the time on a CPU and the waiting from the kernel's
// scheduler statistics (Linux's /proc/self/task/*/schedstat).
func TestWatchHostSeesWaiting(t *testing.T) {
	if _, err := os.Stat("/proc/self/schedstat"); err != nil {
		t.Skip("no scheduler statistics on this system")
	}
	n := 4 * runtime.NumCPU()
	defer runtime.GOMAXPROCS(runtime.GOMAXPROCS(n))
	w := watchHost(20)
	var wg sync.WaitGroup
	stop := time.Now().Add(300 * time.Millisecond)
	for range n {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for time.Now().Before(stop) {
			}
		}()
	}
	wg.Wait()
	l := w.Stop()
	if !l.Known {
		t.Fatal("scheduler statistics not read")
	}
	// n threads runnable for 0.3 s on NumCPU CPUs: at most 0.3 s ×
	// NumCPU on a CPU (less on a machine busy with other work), so at
	// least 0.3 s × (n − NumCPU) waiting, less what the start and stop
	// of the threads take.
	if l.CPU <= 0 {
		t.Errorf("CPU %v, want some", l.CPU)
	}
	if l.Wait < 300*time.Millisecond {
		t.Errorf("waited %v with %d threads spinning on %d CPUs, want at least 0.3 s", l.Wait, n, runtime.NumCPU())
	}
	if !l.Busy() || l.Pressure() <= 10 {
		t.Errorf("pressure %.1f, busy %v: %d threads for %d CPUs at 20× should count as busy", l.Pressure(), l.Busy(), n, runtime.NumCPU())
	}
}
