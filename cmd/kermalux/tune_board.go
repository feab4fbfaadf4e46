//go:build board

package main

import (
	"os"
	"runtime/debug"
)

// A board build runs on a small computer whose memory it shares with the
// operating system: collect garbage at half the default heap growth and
// keep a soft limit of 16 MiB on the Go heap (GOGC and GOMEMLIMIT in the
// environment still override these).
func init() {
	if os.Getenv("GOGC") == "" {
		debug.SetGCPercent(50)
	}
	if os.Getenv("GOMEMLIMIT") == "" {
		debug.SetMemoryLimit(16 << 20)
	}
}
