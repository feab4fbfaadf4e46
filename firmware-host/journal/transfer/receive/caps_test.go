package receive

import (
	"bytes"
	"context"
	"io"
	"net/http"
	"net/http/httptest"
	"testing"

	"kermalux/firmware-host/journal/transfer/push"
	"kermalux/firmware-host/journal/transfer/wire"
)

// The receiver's limits hold (issue 14 item 5: anyone could post 64 MiB
// per request with no limit on concurrent requests): a request beyond
// Concurrent waits for a slot, then is told to retry (503 with
// Retry-After), and a body over MaxBody is refused with 413. The memory
// test posts exactly DefaultConcurrent bodies, so it never reaches the
// concurrency cap.
func TestReceiverCaps(t *testing.T) {
	ctx := context.Background()
	j := board(t, t.TempDir(), 1, 200, false)
	defer j.Close()
	st := workstation(t, "sqlite", j.PublicKey())
	srv := httptest.NewServer(Handler(st, Options{Log: quiet, Concurrent: 1, MaxBody: 4 << 10}))
	defer srv.Close()

	// One push that never sends its body holds the only slot.
	pr, pw := io.Pipe()
	defer pw.Close() // before the server closes, should the test fail
	held := make(chan int, 1)
	go func() {
		resp, err := http.Post(srv.URL+wire.PathPush, wire.ContentType, pr)
		if err != nil {
			held <- 0
			return
		}
		resp.Body.Close()
		held <- resp.StatusCode
	}()
	// Probe until a request finds the slot taken (a probe that comes
	// before the held push takes the slot itself and ends at once, as
	// malformed).
	busy := false
	for i := 0; i < 20 && !busy; i++ {
		resp, err := http.Post(srv.URL+wire.PathMarks, "application/json", bytes.NewReader(nil))
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
		if resp.StatusCode == http.StatusServiceUnavailable {
			busy = true
			if resp.Header.Get("Retry-After") == "" {
				t.Error("503 without Retry-After")
			}
		}
	}
	if !busy {
		t.Fatal("a request beyond the concurrency limit was served")
	}
	pw.Close()
	if code := <-held; code != http.StatusBadRequest {
		t.Errorf("the held push, its body empty: %d, want 400", code)
	}

	// A body over MaxBody: 413, whatever it holds (here a real push of
	// 200 readings, about 10 KB compressed).
	var body bytes.Buffer
	sw, err := wire.NewWriter(&body, wire.KindPush, st.ID(), j)
	if err != nil {
		t.Fatal(err)
	}
	recs, _ := j.Records(ctx, mustSession(t, j), 0, 0)
	if err := sw.Segment(recs); err != nil {
		t.Fatal(err)
	}
	sw.Close()
	if body.Len() <= 4<<10 {
		t.Fatalf("test body of %d bytes is not over the limit", body.Len())
	}
	if code, r := post(t, srv.URL+wire.PathPush, body.Bytes()); code != http.StatusRequestEntityTooLarge || r.Error != "too_large" {
		t.Errorf("body of %d bytes over a 4 KiB limit: %d %+v", body.Len(), code, r)
	}
	// With the slot free again and small segments, the board's own push
	// goes through, request by request, every record once.
	if _, err := push.Push(ctx, j, push.Options{URL: srv.URL, SegmentSize: 8}); err != nil {
		t.Fatalf("push after the refusals: %v", err)
	}
	sameRecords(t, j, st)
}
