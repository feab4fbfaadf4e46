//go:build !board

package main

import (
	"context"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"kermalux/firmware-host/journal/store/storetest"
)

// TestStoreCommandsOnBothBackends: every store command takes the SQLite
// file or a postgres:// URL for --store (issue 11): enroll, import (twice:
// the second stores nothing new), receive with a push into it, report and
// trend, each run through the command line on each backend (PostgreSQL
// when KERMALUX_TEST_POSTGRES names a server, as in CI).
func TestStoreCommandsOnBothBackends(t *testing.T) {
	storetest.Each(t, func(t *testing.T, backend string) {
		target := storetest.Target(t, backend)
		dir := t.TempDir()
		jp, key := boardJournal(t, dir)
		if code, out, errb := run(t, "enroll", "--store", target, "--key", key, "--name", "van-2"); code != exitOK || !strings.Contains(out, `enrolled board "van-2"`) {
			t.Fatalf("enroll: exit %d %s %s", code, out, errb)
		}
		bundle := filepath.Join(dir, "van-2.kxb")
		if code, out, errb := run(t, "bundle", "--journal", jp, "--out", bundle); code != exitOK {
			t.Fatalf("bundle: exit %d %s %s", code, out, errb)
		}
		code, out, errb := run(t, "import", "--store", target, bundle)
		if m := regexp.MustCompile(`imported (\d+) new records`).FindStringSubmatch(out); code != exitOK || m == nil || m[1] == "0" {
			t.Fatalf("import: exit %d %q %s", code, out, errb)
		}
		if code, out, errb := run(t, "import", "--store", target, bundle); code != exitOK || !strings.Contains(out, "imported 0 new records") {
			t.Fatalf("second import: exit %d %q %s", code, out, errb)
		}

		// receive into the same store, and a push of a new session.
		sub, _, err := root.Find([]string{"receive"})
		if err != nil {
			t.Fatal(err)
		}
		ctx, cancel := context.WithCancel(context.Background())
		defer cancel()
		sub.SetContext(ctx)
		defer sub.SetContext(context.Background())
		var rout, rerr lockedBuffer
		done := make(chan int, 1)
		resetFlags(root)
		go func() {
			done <- execute([]string{"receive", "--store", target, "--listen", "127.0.0.1:0"}, &rout, &rerr)
		}()
		addr := regexp.MustCompile(`receiving on (http://127\.0\.0\.1:\d+)`)
		deadline := time.Now().Add(20 * time.Second)
		var url string
		for url == "" {
			if m := addr.FindStringSubmatch(rout.String()); m != nil {
				url = m[1]
				break
			}
			select {
			case code := <-done:
				t.Fatalf("receive ended with exit %d: %s %s", code, rout.String(), rerr.String())
			default:
			}
			if time.Now().After(deadline) {
				t.Fatalf("receive never said where it listens: %q %q", rout.String(), rerr.String())
			}
			time.Sleep(10 * time.Millisecond)
		}
		appendSession(t, jp, 1, 2)
		// The push runs while receive does: root's flags are reset only
		// by run, which the receive goroutine no longer reads.
		code, out, errb = run(t, "push", "--journal", jp, "--to", url)
		if m := regexp.MustCompile(`pushed (\d+) records`).FindStringSubmatch(out); code != exitOK || m == nil || m[1] == "0" {
			t.Fatalf("push into receive --store %s: exit %d %q %s", backend, code, out, errb)
		}
		cancel()
		if code := <-done; code != exitOK {
			t.Errorf("receive ended with exit %d: %s", code, rerr.String())
		}

		reports := filepath.Join(dir, "reports")
		if err := os.Mkdir(reports, 0o755); err != nil {
			t.Fatal(err)
		}
		if code, out, errb := run(t, "report", "--store", target, "--serial", "LX23-0100", "--latest", "--out", reports); code != exitOK {
			t.Fatalf("report: exit %d %s %s", code, out, errb)
		}
		if html, _ := filepath.Glob(filepath.Join(reports, "report-*.html")); len(html) != 1 {
			t.Errorf("report wrote %v, want one HTML page", html)
		}
		if code, out, errb := run(t, "trend", "LX23-0100", "--store", target, "--json"); code != exitOK || !strings.Contains(out, "LX23-0100") {
			t.Errorf("trend: exit %d %q %s", code, out, errb)
		}
	})
}
