package main

import (
	"bufio"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"
)

// BenchmarkDemoFootprint runs the whole `kermalux demo` sequence as its own
// process and reports what a small board cares about: the peak resident
// memory of the process (the kernel's ru_maxrss, from wait4) and the time
// from start to the spoken "Ready" prompt. It builds the board binary
// (`-tags board`: no report renderer, a small-board garbage-collector
// setting; stripped), as it would be installed. The demo process also holds
// the bench simulator, so its memory is an upper bound for the board side
// (engine, drivers, journal). Targets: below 30 MB and below 200 ms.
//
//	go test -run xxx -bench DemoFootprint -benchtime 3x ./cmd/kermalux
func BenchmarkDemoFootprint(b *testing.B) {
	dir := b.TempDir()
	bin := filepath.Join(dir, "kermalux")
	build := exec.Command("go", "build", "-tags", "board", "-ldflags", "-s -w", "-o", bin, ".")
	build.Env = append(os.Environ(), "CGO_ENABLED=0")
	if out, err := build.CombinedOutput(); err != nil {
		b.Fatalf("build: %v\n%s", err, out)
	}
	var rss, ready, wall float64
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		cmd := exec.Command(bin, "demo", "--out", filepath.Join(dir, "out"), "--speed", "60")
		stdout, err := cmd.StdoutPipe()
		if err != nil {
			b.Fatal(err)
		}
		start := time.Now()
		if err := cmd.Start(); err != nil {
			b.Fatal(err)
		}
		sc := bufio.NewScanner(stdout)
		var readyAt time.Duration
		for sc.Scan() {
			if readyAt == 0 && strings.Contains(sc.Text(), "Ready.") {
				readyAt = time.Since(start)
			}
		}
		if err := cmd.Wait(); err != nil {
			b.Fatalf("demo: %v", err)
		}
		wall += time.Since(start).Seconds()
		if readyAt == 0 {
			b.Fatal("the demo never said Ready")
		}
		ready += float64(readyAt.Milliseconds())
		ru := cmd.ProcessState.SysUsage().(*syscall.Rusage)
		rss += float64(ru.Maxrss) / 1024 // Linux reports kilobytes
	}
	n := float64(b.N)
	b.ReportMetric(rss/n, "peak_rss_MB")
	b.ReportMetric(ready/n, "ready_ms")
	b.ReportMetric(wall/n, "wall_s")
}
