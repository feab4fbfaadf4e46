package journal

import (
	"os"
	"syscall"
)

// datasync makes f's data durable with fdatasync(2): the mark file is
// rewritten in place at a fixed size, so its data is all that must reach
// the disk. fsync(2) would also write its new modification time, one more
// journal commit of the file system per mark, beside SQLite's own.
func datasync(f *os.File) error {
	for {
		err := syscall.Fdatasync(int(f.Fd()))
		if err != syscall.EINTR {
			if err != nil {
				return &os.PathError{Op: "fdatasync", Path: f.Name(), Err: err}
			}
			return nil
		}
	}
}
