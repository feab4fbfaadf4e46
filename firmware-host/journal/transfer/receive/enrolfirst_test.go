package receive

import (
	"bytes"
	"crypto/ed25519"
	"encoding/json"
	"io"
	"math/rand/v2"
	"net/http"
	"net/http/httptest"
	"testing"

	"kermalux/firmware-host/journal/transfer/wire"
)

// countingReader counts the bytes the handler takes from a body.
type countingReader struct {
	r io.Reader
	n int64
}

func (c *countingReader) Read(p []byte) (int, error) {
	n, err := c.r.Read(p)
	c.n += int64(n)
	return n, err
}

// A board the store has not enrolled is refused from its stream's
// preamble, before the receiver decodes anything of what follows (issue 14
// item 5: the whole body was decoded before the enrolment check). After the
// preamble comes an endless run of random bytes: a receiver that read on
// would answer "malformed" (it is no DEFLATE stream) after reading some of
// it, or read for ever. The memory test's unenrolled body, a real segment,
// is refused at its first segment either way, so it cannot tell.
func TestUnenrolledRefusedFromPreamble(t *testing.T) {
	seed := make([]byte, ed25519.SeedSize)
	seed[0] = 41
	owner := keySigner{ed25519.NewKeyFromSeed(seed)}
	st := workstation(t, "sqlite", owner.PublicKey())
	seed[0] = 42
	stranger := keySigner{ed25519.NewKeyFromSeed(seed)}

	var pre bytes.Buffer
	if _, err := wire.NewWriter(&pre, wire.KindPush, st.ID(), stranger); err != nil { // the preamble only
		t.Fatal(err)
	}
	var chacha [32]byte
	body := &countingReader{r: io.MultiReader(bytes.NewReader(pre.Bytes()), rand.NewChaCha8(chacha))}
	req := httptest.NewRequest(http.MethodPost, wire.PathPush, body)
	req.Header.Set("Content-Type", wire.ContentType)
	rec := httptest.NewRecorder()
	Handler(st, Options{Log: quiet}).ServeHTTP(rec, req)

	var r wire.Refusal
	_ = json.Unmarshal(rec.Body.Bytes(), &r)
	if rec.Code != http.StatusForbidden || r.Error != "not_enrolled" {
		t.Errorf("stranger's push: %d %+v, want 403 not_enrolled", rec.Code, r)
	}
	// What a buffered reader takes in one go is allowed; a segment's worth
	// (wire.MaxSegmentBytes) is not.
	if limit := int64(pre.Len()) + 64<<10; body.n > limit {
		t.Errorf("read %d bytes of a stranger's body before refusing it (preamble %d bytes, at most %d allowed)", body.n, pre.Len(), limit)
	}
	t.Logf("refused after %d bytes (preamble %d)", body.n, pre.Len())
}
