package wire

import (
	"bytes"
	"errors"
	"strings"
	"testing"
)

// A reader refuses a segment whose records add up to more than
// MaxSegmentBytes, whoever wrote it (issue 14 item 5: a receiver's memory
// is bounded by what one segment may hold). Writer.Segment never writes
// one (TestWriterSplitsSegments), so the stream here is written by the
// unsplit segment writer: five records of 900 kB, each within MaxPayload
// and the segment within MaxSegmentRecords. Without the reader's check a
// segment could hold 10,000 records of 1 MiB.
func TestReaderRefusesOversizedSegment(t *testing.T) {
	t.Parallel()
	big := chain("s", 5)
	for i := range big {
		big[i].Payload = []byte(`{"note":"` + strings.Repeat("x", 900_000) + `"}`)
	}
	rechain(big)
	var buf bytes.Buffer
	w, err := NewWriter(&buf, KindPush, "x", newSeedSigner())
	if err != nil {
		t.Fatal(err)
	}
	if err := w.segment(big); err != nil {
		t.Fatal(err)
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	segs, err := readAll(buf.Bytes(), "oversized")
	if !errors.Is(err, ErrCorrupt) || !strings.Contains(err.Error(), "bytes of records in one segment") || len(segs) != 0 {
		t.Errorf("a segment of 5 × 900 kB records: %d segments read, %v", len(segs), err)
	}
}
