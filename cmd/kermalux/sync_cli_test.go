//go:build !board

package main

import (
	"bytes"
	"context"
	"io"
	"log/slog"
	"net"
	"net/http/httptest"
	"path/filepath"
	"regexp"
	"strings"
	"sync"
	"testing"
	"time"

	"kermalux/firmware-host/journal/store"
	"kermalux/firmware-host/journal/transfer/receive"
)

// lockedBuffer is a bytes.Buffer written by a command running in another
// goroutine and read by the test.
type lockedBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (l *lockedBuffer) Write(p []byte) (int, error) {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.Write(p)
}

func (l *lockedBuffer) String() string {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.String()
}

// receive listens on loopback unless told otherwise, and without a
// certificate it warns that the records travel unencrypted (issue 14
// item 12: it printed the same line as with TLS and listened on every
// interface).
func TestReceivePlainHTTPWarnsAndListensOnLoopback(t *testing.T) {
	sub, _, err := root.Find([]string{"receive"})
	if err != nil || sub.Name() != "receive" {
		t.Fatalf("no receive command: %v", err)
	}
	def := sub.Flags().Lookup("listen").DefValue
	host, _, err := net.SplitHostPort(def)
	if ip := net.ParseIP(host); err != nil || ip == nil || !ip.IsLoopback() {
		t.Errorf("receive listens on %q by default, want a loopback address", def)
	}

	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	sub.SetContext(ctx)
	defer sub.SetContext(context.Background())
	var out, errb lockedBuffer
	done := make(chan int, 1)
	resetFlags(root)
	sp := filepath.Join(t.TempDir(), "office.db")
	go func() { done <- execute([]string{"receive", "--store", sp, "--listen", "127.0.0.1:0"}, &out, &errb) }()
	deadline := time.Now().Add(20 * time.Second)
	for !strings.Contains(out.String(), "receiving on") {
		select {
		case code := <-done:
			t.Fatalf("receive ended with exit %d before listening: %s %s", code, out.String(), errb.String())
		default:
		}
		if time.Now().After(deadline) {
			t.Fatalf("receive never said it listens: %q %q", out.String(), errb.String())
		}
		time.Sleep(10 * time.Millisecond)
	}
	cancel()
	if code := <-done; code != exitOK {
		t.Errorf("receive ended with exit %d: %s", code, errb.String())
	}
	if !strings.Contains(errb.String(), "warning: plain HTTP") {
		t.Errorf("no plain-HTTP warning on stderr: %q", errb.String())
	}
	if !strings.Contains(out.String(), "receiving on http://127.0.0.1:") {
		t.Errorf("the listening line does not say http on loopback: %q", out.String())
	}
}

// push over http:// warns (issue 14 item 12: it was silent), and a board
// revoked with enroll --revoke (item 20: there was no way to) is refused
// from then on, its refusal named in the store's log.
func TestPushWarnsAndRevokedBoardIsRefused(t *testing.T) {
	dir := t.TempDir()
	jp, key := boardJournal(t, dir)
	sp := filepath.Join(t.TempDir(), "office.db")
	if code, out, errb := run(t, "enroll", "--store", sp, "--key", key, "--name", "north-van-2"); code != exitOK || !strings.Contains(out, `enrolled board "north-van-2"`) {
		t.Fatalf("enroll: exit %d %s %s", code, out, errb)
	}
	st, err := store.Open(sp)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	srv := httptest.NewServer(receive.Handler(st, receive.Options{Log: slog.New(slog.NewTextHandler(io.Discard, nil))}))
	defer srv.Close()

	code, out, errb := run(t, "push", "--journal", jp, "--to", srv.URL)
	if code != exitOK {
		t.Fatalf("push: exit %d %s %s", code, out, errb)
	}
	if !strings.Contains(errb, "warning: "+srv.URL+" is plain HTTP") {
		t.Errorf("push over http:// gave no warning: %q", errb)
	}
	if m := regexp.MustCompile(`pushed (\d+) records`).FindStringSubmatch(out); m == nil || m[1] == "0" {
		t.Errorf("push summary %q", out)
	}

	code, out, errb = run(t, "enroll", "--store", sp, "--revoke", "--key", key)
	if code != exitOK || !strings.Contains(out, `revoked board "north-van-2"`) {
		t.Fatalf("revoke: exit %d %s %s", code, out, errb)
	}
	if code, _, errb := run(t, "enroll", "--store", sp, "--revoke", "--key", key); code != exitFailure || !strings.Contains(errb, "already revoked") {
		t.Errorf("second revoke: exit %d %s", code, errb)
	}
	// A new session on the revoked board: its push is refused.
	id := appendSession(t, jp, 1, 2)
	code, _, errb = run(t, "push", "--journal", jp, "--to", srv.URL)
	if code != exitFailure || !strings.Contains(errb, "revoked") {
		t.Errorf("push of a revoked board: exit %d %s", code, errb)
	}
	if got, _ := st.Records(context.Background(), id, 0, 0); len(got) != 0 {
		t.Errorf("the revoked board's session was stored (%d records)", len(got))
	}
	log, err := st.Log(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	named := false
	for _, e := range log {
		named = named || (e.Board == key && strings.Contains(e.Event, "revoked"))
	}
	if !named {
		t.Errorf("the store's log does not name the revoked board's refusal: %+v", log)
	}
}
