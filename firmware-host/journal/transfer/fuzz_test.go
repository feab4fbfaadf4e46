package transfer

import (
	"bytes"
	"context"
	"encoding/json"
	"net/http"
	"net/http/httptest"
	"testing"

	"kermalux/firmware-host/journal"
)

// seeds returns a valid batch, a valid bundle and the board's key.
func seeds(f *testing.F) (batch, bundle []byte, j *journal.Journal) {
	j = board(f, f.TempDir(), 2, 2, true)
	f.Cleanup(func() { j.Close() })
	ss, _ := j.Sessions(context.Background())
	b, _ := j.NextBatch(context.Background(), ss[0].ID, 0, 4)
	batch, _ = json.Marshal(b)
	var buf bytes.Buffer
	WriteBundle(context.Background(), j, &buf, 5, nil)
	return batch, buf.Bytes(), j
}

func FuzzDecodeBatch(f *testing.F) {
	batch, _, j := seeds(f)
	f.Add(batch)
	f.Add(batch[:len(batch)/2])
	f.Add([]byte(`{"format":"kermalux-batch-1","board":"00","session":"s","records":[{}]}`))
	f.Add([]byte(`[]`))
	f.Fuzz(func(t *testing.T, data []byte) {
		b, err := DecodeBatch(data)
		if err != nil {
			return
		}
		if b.Session == "" || len(b.Records) == 0 {
			t.Fatalf("decoded a batch without session or records")
		}
		// Checking never panics; only the untouched seed verifies.
		if b.Check(j.PublicKey()) == nil && !bytes.Equal(data, batch) {
			var again journal.Batch
			json.Unmarshal(batch, &again)
			if again.Sig != b.Sig {
				t.Fatalf("a batch with a different signature verified")
			}
		}
	})
}

func FuzzReadBundle(f *testing.F) {
	_, bundle, j := seeds(f)
	f.Add(bundle)
	f.Add(bundle[:len(bundle)-10])
	f.Add([]byte("{\"format\":\"kermalux-bundle-1\",\"board\":\"" + j.BoardKey() + "\"}\n{\"end\":{}}\n"))
	f.Add([]byte{})
	f.Fuzz(func(t *testing.T, data []byte) {
		b, err := ReadBundle(bytes.NewReader(data), "fuzz.bundle")
		if err != nil {
			return
		}
		pub, err := journal.ParsePublicKey(b.Board)
		if err != nil {
			t.Fatalf("accepted a bundle with board key %q", b.Board)
		}
		for i, bt := range b.Batches {
			if err := bt.Check(pub); err != nil {
				t.Fatalf("accepted a bundle whose batch %d fails: %v", i, err)
			}
		}
	})
}

// FuzzReceive posts arbitrary bodies to both endpoints: the receiver
// answers 200, 400, 403 or 409, never fails inside or panics.
func FuzzReceive(f *testing.F) {
	batch, _, j := seeds(f)
	st := workstation(f, j.PublicKey())
	h := Handler(st, quiet)
	marks, _ := json.Marshal(MarksRequest{Board: j.BoardKey(), Sessions: []string{"x"}})
	f.Add("/v1/batch", batch)
	f.Add("/v1/marks", marks)
	f.Add("/v1/marks", []byte(`{"board":"zz"}`))
	f.Add("/v1/batch", []byte(`{"format":"kermalux-batch-1"`))
	f.Fuzz(func(t *testing.T, path string, body []byte) {
		if path != "/v1/batch" {
			path = "/v1/marks"
		}
		req := httptest.NewRequest(http.MethodPost, path, bytes.NewReader(body))
		rec := httptest.NewRecorder()
		h.ServeHTTP(rec, req)
		switch rec.Code {
		case http.StatusOK, http.StatusBadRequest, http.StatusForbidden, http.StatusConflict:
		default:
			t.Fatalf("status %d for %s %q: %s", rec.Code, path, body, rec.Body)
		}
		if rec.Code != http.StatusOK {
			var r Refusal
			if json.Unmarshal(rec.Body.Bytes(), &r) != nil || r.Reason == "" {
				t.Fatalf("refusal without a reason: %s", rec.Body)
			}
		}
	})
}
