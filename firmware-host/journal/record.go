package journal

import (
	"bytes"
	"crypto/ed25519"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"strconv"
	"time"
	"unicode/utf8"

	"kermalux/procedures/entry"
)

// HashSize is the length of a record hash (SHA-256, FIPS 180-4).
const HashSize = sha256.Size

// Signature domains: each signed message starts with one of these so that a
// signature made for one purpose can never be replayed as another (the sync
// stream's segment and bundle domains are in package transfer/wire).
const (
	recordDomain = "kermalux record v1\x00"
	headDomain   = "kermalux head v1\x00"
)

// WallFormat is how wall times are written in records: RFC 3339 with
// nanoseconds, always UTC, trailing zeros trimmed (time.RFC3339Nano).
const WallFormat = time.RFC3339Nano

// Record is one journal record as stored on the board, carried in batches
// and bundles and kept by the workstation. Hash is SHA-256 over Canonical();
// Prev is the Hash of the previous record of the same session (all zero
// bytes for seq 1); Sig is the board's ed25519 signature of
// "kermalux record v1\x00" || Hash. See FORMAT.md.
type Record struct {
	Seq     int64           `json:"seq"`
	Session string          `json:"session"`
	Kind    entry.Kind      `json:"kind"`
	Wall    string          `json:"wall"`    // WallFormat, UTC
	Mono    int64           `json:"mono_ns"` // monotonic nanoseconds of the writing process's clock
	BootID  string          `json:"boot_id"`
	Payload json.RawMessage `json:"payload"` // canonical JSON (see CanonicalPayload)
	Prev    string          `json:"prev"`    // hex
	Hash    string          `json:"hash"`    // hex
	Sig     string          `json:"sig"`     // hex
}

// Canonical returns the bytes the record's hash is computed over:
//
//	{"seq":S,"session":J,"kind":J,"wall":J,"mono_ns":M,"boot_id":J,"prev":"HEX","payload":P}
//
// where S and M are base-10 integers, each J is the field as a JSON string
// (Go encoding/json string encoding), HEX is Prev in lower-case hex and P
// is the payload bytes exactly as stored. No whitespace anywhere.
func (r *Record) Canonical() []byte { return r.AppendCanonical(make([]byte, 0, 160+len(r.Payload))) }

// AppendCanonical appends Canonical() to b (a receiver hashing many
// records reuses one buffer).
func (r *Record) AppendCanonical(b []byte) []byte {
	b = append(b, `{"seq":`...)
	b = strconv.AppendInt(b, r.Seq, 10)
	b = append(b, `,"session":`...)
	b = appendJSONString(b, r.Session)
	b = append(b, `,"kind":`...)
	b = appendJSONString(b, string(r.Kind))
	b = append(b, `,"wall":`...)
	b = appendJSONString(b, r.Wall)
	b = append(b, `,"mono_ns":`...)
	b = strconv.AppendInt(b, r.Mono, 10)
	b = append(b, `,"boot_id":`...)
	b = appendJSONString(b, r.BootID)
	b = append(b, `,"prev":"`...)
	b = append(b, r.Prev...)
	b = append(b, `","payload":`...)
	b = append(b, r.Payload...)
	return append(b, '}')
}

// appendJSONString appends s as encoding/json writes a string. Strings of
// plain printable ASCII without the characters json escapes (ids, hex,
// times) are written directly; anything else goes through json.Marshal.
func appendJSONString(b []byte, s string) []byte {
	for i := 0; i < len(s); i++ {
		c := s[i]
		if c < 0x20 || c >= 0x7f || c == '"' || c == '\\' || c == '<' || c == '>' || c == '&' {
			q, _ := json.Marshal(s) // a string always marshals
			return append(b, q...)
		}
	}
	b = append(b, '"')
	b = append(b, s...)
	return append(b, '"')
}

// ComputeHash returns SHA-256 of Canonical().
func (r *Record) ComputeHash() [HashSize]byte { return sha256.Sum256(r.Canonical()) }

// Envelope returns the record as the report and the store see it.
func (r *Record) Envelope() (entry.Envelope, error) {
	w, err := time.Parse(WallFormat, r.Wall)
	if err != nil {
		return entry.Envelope{}, fmt.Errorf("record %d: wall time %q: %w", r.Seq, r.Wall, err)
	}
	return entry.Envelope{Seq: r.Seq, Session: r.Session, Kind: r.Kind, Wall: w,
		Mono: time.Duration(r.Mono), BootID: r.BootID, Payload: r.Payload}, nil
}

// CanonicalPayload returns the canonical form of JSON text: compacted
// (encoding/json Compact) with <, >, & and U+2028/U+2029 escaped inside
// strings (encoding/json HTMLEscape), which is exactly what json.Marshal
// produces, so a marshalled payload is already canonical.
func CanonicalPayload(raw []byte) ([]byte, error) {
	var c bytes.Buffer
	if err := json.Compact(&c, raw); err != nil {
		return nil, err
	}
	var h bytes.Buffer
	json.HTMLEscape(&h, c.Bytes())
	return h.Bytes(), nil
}

func zeroHashHex() string { return hex.EncodeToString(make([]byte, HashSize)) }

func recordMessage(hash []byte) []byte {
	return append([]byte(recordDomain), hash...)
}

func headMessage(session string, seq int64, hash []byte) []byte {
	m := make([]byte, 0, len(headDomain)+len(session)+9+len(hash))
	m = append(m, headDomain...)
	m = append(m, session...)
	m = append(m, 0)
	m = binary.BigEndian.AppendUint64(m, uint64(seq))
	return append(m, hash...)
}

// Check verifies a record on its own: field sanity, canonical payload,
// hash and signature against pub. It does not check the chain (Prev).
func (r *Record) Check(pub ed25519.PublicKey) error { return r.check(pub, true) }

// check is Check; unless sig is set it skips the record signature (the
// caller authenticates the hash another way, e.g. a batch signature) and
// the payload's canonical form and decoding into its kind's type: the
// caller decoded the record from JSON (so the payload is valid JSON) and
// the payload's bytes are covered by the hash.
func (r *Record) check(pub ed25519.PublicKey, sig bool) error {
	if r.Seq < 1 {
		return fmt.Errorf("sequence number %d is not positive", r.Seq)
	}
	if r.Session == "" || !utf8.ValidString(r.Session) {
		return fmt.Errorf("session id is empty or not UTF-8")
	}
	if r.Kind == "" {
		return fmt.Errorf("kind is empty")
	}
	if !utf8.ValidString(string(r.Kind)) || !utf8.ValidString(r.BootID) || !utf8.ValidString(r.Wall) {
		return fmt.Errorf("text field is not UTF-8")
	}
	if _, err := time.Parse(WallFormat, r.Wall); err != nil {
		return fmt.Errorf("wall time %q is not RFC 3339: %w", r.Wall, err)
	}
	prev, err := hex.DecodeString(r.Prev)
	if err != nil || len(prev) != HashSize {
		return fmt.Errorf("previous hash %q is not %d hex bytes", abbrevHex(r.Prev), HashSize)
	}
	if sig {
		canon, err := CanonicalPayload(r.Payload)
		if err != nil {
			return fmt.Errorf("payload is not JSON: %w", err)
		}
		if !bytes.Equal(canon, r.Payload) {
			return fmt.Errorf("payload is not in canonical form (extra whitespace or unescaped characters)")
		}
		if err := checkPayloadKind(r.Kind, r.Payload); err != nil {
			return err
		}
	} else if len(r.Payload) == 0 {
		return fmt.Errorf("payload is empty")
	}
	want := r.ComputeHash()
	got, err := hex.DecodeString(r.Hash)
	if err != nil || len(got) != HashSize {
		return fmt.Errorf("hash %q is not %d hex bytes", abbrevHex(r.Hash), HashSize)
	}
	if !bytes.Equal(got, want[:]) {
		return fmt.Errorf("%w: stored %s, contents hash to %s", ErrHashMismatch, abbrevHex(r.Hash), abbrevHex(hex.EncodeToString(want[:])))
	}
	if !sig {
		return nil // authenticated by the caller; a stream may carry no record signature
	}
	sb, err := hex.DecodeString(r.Sig)
	if err != nil || len(sb) != ed25519.SignatureSize {
		return fmt.Errorf("%w: signature is not %d hex bytes", ErrBadSignature, ed25519.SignatureSize)
	}
	if !ed25519.Verify(pub, recordMessage(got), sb) {
		return fmt.Errorf("%w: record signature does not verify with board key %s", ErrBadSignature, abbrevHex(hex.EncodeToString(pub)))
	}
	return nil
}

// checkPayloadKind decodes a payload of a known kind into its type, so a
// record that would not decode in the report is caught at once. Unknown
// kinds are accepted (a newer board may add kinds) if they are JSON objects.
func checkPayloadKind(k entry.Kind, p []byte) error {
	var v any
	switch k {
	case entry.KindSession:
		v = new(entry.Session)
	case entry.KindStep:
		v = new(entry.Step)
	case entry.KindPrompt:
		v = new(entry.Prompt)
	case entry.KindAck:
		v = new(entry.Ack)
	case entry.KindValue:
		v = new(entry.Value)
	case entry.KindReading:
		v = new(entry.Reading)
	case entry.KindEvent:
		v = new(entry.Event)
	case entry.KindResult:
		v = new(entry.Result)
	case entry.KindSessionEnd:
		v = new(entry.SessionEnd)
	default:
		v = new(map[string]any)
	}
	if err := json.Unmarshal(p, v); err != nil {
		return fmt.Errorf("payload does not decode as %s: %w", k, err)
	}
	return nil
}

// CheckChain checks that recs are consecutive records of one session
// starting after a record with hash prevHash (hex; zero hash when recs[0]
// is seq 1), each passing Check. It returns the index of the first bad
// record with the error, or -1, nil.
func CheckChain(pub ed25519.PublicKey, prevSeq int64, prevHash string, recs []Record) (int, error) {
	return checkChain(pub, prevSeq, prevHash, recs, true)
}

func checkChain(pub ed25519.PublicKey, prevSeq int64, prevHash string, recs []Record, sigs bool) (int, error) {
	for i := range recs {
		r := &recs[i]
		if r.Seq != prevSeq+1 {
			if r.Seq > prevSeq+1 {
				return i, fmt.Errorf("%w: expected seq %d, found %d (records %d..%d missing)", ErrChainBroken, prevSeq+1, r.Seq, prevSeq+1, r.Seq-1)
			}
			return i, fmt.Errorf("%w: expected seq %d, found %d (duplicate or out of order)", ErrChainBroken, prevSeq+1, r.Seq)
		}
		if err := r.check(pub, sigs); err != nil {
			return i, err
		}
		if r.Prev != prevHash {
			return i, fmt.Errorf("%w: previous hash %s does not match the hash %s of record %d", ErrChainBroken, abbrevHex(r.Prev), abbrevHex(prevHash), prevSeq)
		}
		if i > 0 && r.Session != recs[0].Session {
			return i, fmt.Errorf("session %q differs from %q in the same chain", r.Session, recs[0].Session)
		}
		prevSeq, prevHash = r.Seq, r.Hash
	}
	return -1, nil
}

// abbrevHex shortens a hash or key in hex to its first 12 digits for a message.
func abbrevHex(h string) string {
	if len(h) > 12 {
		return h[:12] + "…"
	}
	return h
}
