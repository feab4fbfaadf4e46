//go:build !linux

package journal

import "os"

// datasync makes f's data durable (fsync where there is no fdatasync).
func datasync(f *os.File) error { return f.Sync() }
