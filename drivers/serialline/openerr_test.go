package serialline_test

import (
	"context"
	"errors"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"

	"github.com/creack/pty"

	"kermalux/drivers"
	"kermalux/drivers/serialline"
)

// Each reason a port cannot be opened gets its own words, and none of
// them says the link was lost: it never was up (issue: all said "link to
// meter lost").
func TestOpenErrorsEachInTheirOwnWords(t *testing.T) {
	dir := t.TempDir()
	file := filepath.Join(dir, "ttyUSB0")
	if err := os.WriteFile(file, []byte("not a device"), 0o644); err != nil {
		t.Fatal(err)
	}
	dangling := filepath.Join(dir, "usb-gone")
	if err := os.Symlink(filepath.Join(dir, "nothing"), dangling); err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct {
		name, port string
		is         error
		words      string
	}{
		{"no such path", filepath.Join(dir, "ttyUSB9"), serialline.ErrNoDevice, "is the adapter plugged in"},
		{"dangling by-id link", dangling, serialline.ErrNoDevice, "no such device"},
		{"regular file", file, serialline.ErrNotSerial, "regular file"},
		{"directory", dir, serialline.ErrNotSerial, "directory"},
		{"not a terminal", "/dev/null", serialline.ErrNotSerial, "not a serial device"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := serialline.Open(context.Background(), serialline.Config{Port: tc.port}, serialline.Options{})
			if !errors.Is(err, tc.is) || !strings.Contains(err.Error(), tc.words) || !strings.Contains(err.Error(), tc.port) {
				t.Fatalf("got %v; want %v, naming %s and saying %q", err, tc.is, tc.port, tc.words)
			}
			if errors.Is(err, drivers.ErrLinkDown) || strings.Contains(err.Error(), drivers.ErrLinkDown.Error()) {
				t.Errorf("got %v: an open that never succeeded is not a lost link", err)
			}
		})
	}
}

// Permission denied (with the dialout hint) and port busy need an
// unprivileged user: root bypasses both the file mode and the kernel's
// exclusive-open lock. As root the test runs itself again as nobody.
func TestOpenErrorsPermissionAndBusy(t *testing.T) {
	if os.Getenv("KX_SERIAL_CHILD") != "" {
		return // the child's work is in TestOpenAsChild
	}
	m, s, err := pty.Open()
	if err != nil {
		t.Fatal(err)
	}
	defer m.Close()
	defer s.Close()
	// A device only its owner may open.
	if err := os.Chmod(s.Name(), 0o600); err != nil {
		t.Fatal(err)
	}
	// A second pty, held open by this process through the serial library,
	// which takes the exclusive lock (TIOCEXCL).
	m2, s2, err := pty.Open()
	if err != nil {
		t.Fatal(err)
	}
	defer m2.Close()
	defer s2.Close()
	if err := os.Chmod(s2.Name(), 0o666); err != nil {
		t.Fatal(err)
	}
	held, err := serialline.Open(context.Background(), serialline.Config{Port: s2.Name()}, serialline.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer held.Close()

	if os.Geteuid() != 0 {
		if err := os.Chmod(s.Name(), 0); err != nil {
			t.Fatal(err)
		}
		checkPermissionAndBusy(t, s.Name(), s2.Name())
		return
	}
	// Root: run the check in a copy of this test binary as nobody.
	bin, err := os.Executable()
	if err != nil {
		t.Fatal(err)
	}
	dir, err := os.MkdirTemp("", "kx-serial-child-")
	if err != nil {
		t.Fatal(err)
	}
	defer os.RemoveAll(dir)
	if err := os.Chmod(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	exe := filepath.Join(dir, "serialline.test")
	if err := copyFile(bin, exe); err != nil {
		t.Fatal(err)
	}
	cmd := exec.Command(exe, "-test.run=^TestOpenAsChild$", "-test.v")
	cmd.Dir = dir
	cmd.Env = append(os.Environ(), "KX_SERIAL_CHILD=1", "KX_DENIED="+s.Name(), "KX_BUSY="+s2.Name())
	cmd.SysProcAttr = &syscall.SysProcAttr{Credential: &syscall.Credential{Uid: 65534, Gid: 65534}}
	out, err := cmd.CombinedOutput()
	if err != nil || !strings.Contains(string(out), "--- PASS: TestOpenAsChild") {
		t.Fatalf("as nobody: %v\n%s", err, out)
	}
}

// TestOpenAsChild is the unprivileged half of TestOpenErrorsPermissionAndBusy.
func TestOpenAsChild(t *testing.T) {
	if os.Getenv("KX_SERIAL_CHILD") == "" {
		t.Skip("run by TestOpenErrorsPermissionAndBusy as an unprivileged user")
	}
	checkPermissionAndBusy(t, os.Getenv("KX_DENIED"), os.Getenv("KX_BUSY"))
}

func checkPermissionAndBusy(t *testing.T, denied, busy string) {
	_, err := serialline.Open(context.Background(), serialline.Config{Port: denied}, serialline.Options{})
	if !errors.Is(err, serialline.ErrPermission) || !strings.Contains(err.Error(), "dialout") || !strings.Contains(err.Error(), denied) {
		t.Errorf("no permission: got %v; want permission denied naming %s with the dialout hint", err, denied)
	}
	_, err = serialline.Open(context.Background(), serialline.Config{Port: busy}, serialline.Options{})
	if !errors.Is(err, serialline.ErrBusy) || !strings.Contains(err.Error(), "another program") {
		t.Errorf("held by another: got %v; want port busy", err)
	}
}

func copyFile(from, to string) error {
	in, err := os.Open(from)
	if err != nil {
		return err
	}
	defer in.Close()
	out, err := os.OpenFile(to, os.O_CREATE|os.O_WRONLY|os.O_TRUNC, 0o755)
	if err != nil {
		return err
	}
	if _, err := io.Copy(out, in); err != nil {
		out.Close()
		return err
	}
	return out.Close()
}
