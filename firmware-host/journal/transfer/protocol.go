// Package transfer moves journal records from a board to the workstation
// store: over HTTP (push to a receiving workstation) or on a USB stick
// (bundle, then import). Both carry signed batches (journal.Batch) and
// both go through the same checks in the store before anything is kept.
//
// The HTTP protocol (all bodies JSON, see PROTOCOL.md):
//
//	POST /v1/marks  {"board":KEY,"sessions":[ID...]}  -> {"marks":{ID:SEQ...}}
//	POST /v1/batch  journal.Batch                     -> {"stored":N,"duplicates":D,"high":SEQ}
//
// Refusals carry {"error":CODE,"reason":TEXT}: 400 malformed, 403 refused
// (board not enrolled, bad signature, broken chain, a record that differs
// from the stored one), 409 out of step (a replayed batch whose records are
// all stored, or a gap): the board asks for its marks again and goes on.
package transfer

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"

	"kermalux/firmware-host/journal"
)

// MaxBody is the largest request body the receiver reads.
const MaxBody = 64 << 20

// MarksRequest asks for the store's high-water marks of a board's sessions.
type MarksRequest struct {
	Board    string   `json:"board"`
	Sessions []string `json:"sessions"`
}

// MarksResponse maps each asked session to its last stored seq (0: none).
type MarksResponse struct {
	Marks map[string]int64 `json:"marks"`
}

// BatchResponse says what the store did with a batch.
type BatchResponse struct {
	Stored     int   `json:"stored"`
	Duplicates int   `json:"duplicates"`
	High       int64 `json:"high"`
}

// Refusal is the body of every non-200 answer.
type Refusal struct {
	Error  string `json:"error"`  // "malformed", "refused", "not_enrolled", "replay", "gap", "conflict"
	Reason string `json:"reason"` // for a person
}

// DecodeBatch parses one batch from JSON: exactly one object, with the
// batch format, a board key, a session and at least one record. It does
// not check signatures (journal.Batch.Check does).
func DecodeBatch(data []byte) (*journal.Batch, error) {
	dec := json.NewDecoder(bytes.NewReader(data))
	var b journal.Batch
	if err := dec.Decode(&b); err != nil {
		return nil, fmt.Errorf("batch: %w", describeJSON(data, err))
	}
	if _, err := dec.Token(); !errors.Is(err, io.EOF) {
		return nil, fmt.Errorf("batch: unexpected data after the batch object")
	}
	if b.Format != journal.BatchFormat {
		return nil, fmt.Errorf("batch: format %q, expected %q", b.Format, journal.BatchFormat)
	}
	if _, err := journal.ParsePublicKey(b.Board); err != nil {
		return nil, fmt.Errorf("batch: %w", err)
	}
	if b.Session == "" {
		return nil, fmt.Errorf("batch: no session id")
	}
	if len(b.Records) == 0 {
		return nil, fmt.Errorf("batch of session %s: no records", b.Session)
	}
	return &b, nil
}

// describeJSON adds the byte offset (and line) of a JSON syntax error.
func describeJSON(data []byte, err error) error {
	var se *json.SyntaxError
	var te *json.UnmarshalTypeError
	off := int64(-1)
	switch {
	case errors.As(err, &se):
		off = se.Offset
	case errors.As(err, &te):
		off = te.Offset
	}
	if off < 0 || off > int64(len(data)) {
		return err
	}
	line := 1 + bytes.Count(data[:off], []byte{'\n'})
	return fmt.Errorf("line %d, byte %d: %w", line, off, err)
}
