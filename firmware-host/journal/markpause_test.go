package journal

import (
	"context"
	"testing"
	"time"

	"kermalux/firmware-host/journal/journaltest"
	"kermalux/procedures/entry"
)

// TestMarkPacedAtHighRates: records appended back to back share mark
// writes (each is a signature and a flush to disk beside the journal's
// own commit), at most one per markPause while the appends go on, and
// SyncMark still brings the mark to the last record at once.
func TestMarkPacedAtHighRates(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	j := openTest(t, dir)
	defer j.Close()
	sid, err := j.Begin(ctx, journaltest.Session(1))
	if err != nil {
		t.Fatal(err)
	}
	j.SyncMark()
	written := func() int { j.mark.mu.Lock(); defer j.mark.mu.Unlock(); return j.mark.written }
	before := written()
	const n = 150
	t0 := time.Now()
	var last int64
	for i := 0; i < n; i++ {
		if last, err = j.Append(ctx, sid, entry.KindEvent, entry.Event{Step: 1, Name: "beam_on"}); err != nil {
			t.Fatal(err)
		}
	}
	took := time.Since(t0)
	j.SyncMark()
	m, err := ReadMark(j.Path(), j.PublicKey())
	if err != nil {
		t.Fatal(err)
	}
	if m.Session != sid || m.Seq != last {
		t.Fatalf("after SyncMark the mark names %s record %d, want %s record %d", m.Session, m.Seq, sid, last)
	}
	writes := int64(written() - before)
	// At most one write per pause while appending, one when the pause
	// begins and one for SyncMark.
	if most := int64(took/markPause) + 2; writes > most {
		t.Errorf("%d appends in %v took %d mark writes, want at most %d (one per %v)", n, took, writes, most, markPause)
	}
	if writes < 1 {
		t.Errorf("no mark written for %d appends", n)
	}
}
