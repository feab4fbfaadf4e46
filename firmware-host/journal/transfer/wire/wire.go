// Package wire is the sync stream format (version 2) that carries journal
// records from a board to a workstation store, over HTTP (push) and in a
// file (bundle). It holds the encoding only: no store, no network, so the
// board build links it without the workstation's code.
//
// A stream is a short plain preamble (magic, board key, audience, kind),
// readable before anything is decompressed so that a receiver can refuse an
// unknown board from the first bytes, then a DEFLATE stream (RFC 1951) of
// frames: segments of consecutive records of one session, each closed by
// the board's signature over the session head (the hash of its last
// record), and a closing frame. Record hashes are not sent: the receiver
// recomputes each from the record's contents and the previous hash, so the
// hash chain and the signed head prove every record (PROTOCOL.md).
package wire

import (
	"bufio"
	"bytes"
	"compress/flate"
	"crypto/ed25519"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"errors"
	"fmt"
	"hash"
	"io"
	"unicode/utf8"

	"kermalux/firmware-host/journal"
	"kermalux/procedures/entry"
)

// Magic starts every stream; its last digit is the format version.
const Magic = "kermalux-stream-2\n"

// Stream kinds (the preamble's last byte).
const (
	KindPush   byte = 'P' // an HTTP push body: bound to one store (audience)
	KindBundle byte = 'B' // a bundle file: closed by a signature over all segments
)

// Limits every reader enforces, so that no input can make it hold more
// than a bounded amount of memory.
const (
	MaxAudience       = 128     // bytes of the audience (a store id)
	MaxString         = 1024    // bytes of a session id, kind, wall time or boot id
	MaxPayload        = 1 << 20 // bytes of one record's payload
	MaxSegmentRecords = 10000   // records in one segment
	MaxSegmentBytes   = 4 << 20 // bytes of one segment's records (RecordBytes summed)
	fingerprintSize   = 8       // bytes of each record's hash sent for naming a bad record
	compressLevel     = 2       // DEFLATE level: see PROTOCOL.md, "Why DEFLATE"
	segmentDomain     = "kermalux segment v2\x00"
	bundleDomain      = "kermalux bundle v2\x00"
	tagSegment        = 0x01
	tagRecord         = 0x02
	tagSegmentEnd     = 0x03
	tagEnd            = 0x04
	maxVarintBytes    = binary.MaxVarintLen64
	preambleFixedSize = len(Magic) + ed25519.PublicKeySize
)

// Errors a reader returns, for errors.Is.
var (
	ErrFormat    = errors.New("not a kermalux stream")
	ErrTruncated = errors.New("stream cut short")
	ErrCorrupt   = errors.New("stream does not decode")
	ErrProof     = errors.New("record does not match its proof")
)

// Preamble opens a stream.
type Preamble struct {
	Board    ed25519.PublicKey
	Audience string // the store id a push is meant for ("" in a bundle written for any store)
	Kind     byte
}

// BoardHex is the board key in canonical lower-case hex.
func (p Preamble) BoardHex() string { return hex.EncodeToString(p.Board) }

// Segment is a run of consecutive records of one session with the board's
// signature over its head. Records carry their recomputed hex hashes;
// their per-record signatures are not part of the stream (Sig is empty).
type Segment struct {
	Board    ed25519.PublicKey
	Audience string
	Session  string
	Prev     string // hex hash of the record before the first (zero hash for seq 1)
	Records  []journal.Record
	Sig      []byte // ed25519 over Message()
	Index    int    // 1-based position in the stream, for messages

	verified []byte // the key, message and signature Verify last accepted
}

// First is the first record's seq.
func (s *Segment) First() int64 { return s.Records[0].Seq }

// Last is the last record's seq.
func (s *Segment) Last() int64 { return s.Records[len(s.Records)-1].Seq }

// Head is the hex hash of the last record.
func (s *Segment) Head() string { return s.Records[len(s.Records)-1].Hash }

// SegmentMessage is what a segment signature covers:
//
//	"kermalux segment v2\x00" || board (32 bytes) || uvarint(len audience) || audience ||
//	uvarint(len session) || session || uint64be(first) || uint64be(count) || head (32 bytes)
//
// head is the SHA-256 hash of the last record, which through the chain of
// previous hashes covers every record of the segment and the one before it.
func SegmentMessage(board ed25519.PublicKey, audience, session string, first, count int64, head []byte) []byte {
	m := make([]byte, 0, len(segmentDomain)+len(board)+len(audience)+len(session)+64)
	m = append(m, segmentDomain...)
	m = append(m, board...)
	m = binary.AppendUvarint(m, uint64(len(audience)))
	m = append(m, audience...)
	m = binary.AppendUvarint(m, uint64(len(session)))
	m = append(m, session...)
	m = binary.BigEndian.AppendUint64(m, uint64(first))
	m = binary.BigEndian.AppendUint64(m, uint64(count))
	return append(m, head...)
}

// Message is SegmentMessage of s.
func (s *Segment) Message() []byte {
	head, _ := hex.DecodeString(s.Head())
	return SegmentMessage(s.Board, s.Audience, s.Session, s.First(), int64(len(s.Records)), head)
}

// Verify checks the segment signature against pub (the enrolled key).
// A segment already verified with pub is not verified again (a receiver
// verifies in its decoding goroutine, the store checks again for free).
func (s *Segment) Verify(pub ed25519.PublicKey) error {
	msg := s.Message()
	memo := append(append(append([]byte(nil), pub...), s.Sig...), msg...)
	if s.verified != nil && bytes.Equal(s.verified, memo) {
		return nil
	}
	if !ed25519.Verify(pub, msg, s.Sig) {
		return fmt.Errorf("%w: the signature over session %s records %d..%d (head %s) does not verify with board key %s",
			ErrProof, s.Session, s.First(), s.Last(), short(s.Head()), short(hex.EncodeToString(pub)))
	}
	s.verified = memo
	return nil
}

// Signer signs with the board key.
type Signer interface {
	PublicKey() ed25519.PublicKey
	Sign(msg []byte) []byte
}

// Writer writes a stream.
type Writer struct {
	w      io.Writer
	fw     *flate.Writer
	sign   Signer
	pre    Preamble
	buf    []byte
	digest hash.Hash // bundle: over the preamble and every segment signature
	segs   int64
	recs   int64
	err    error
}

// NewWriter writes the preamble to w and returns a Writer for segments.
func NewWriter(w io.Writer, kind byte, audience string, sign Signer) (*Writer, error) {
	if len(audience) > MaxAudience {
		return nil, fmt.Errorf("stream audience %q: longer than %d bytes", short(audience), MaxAudience)
	}
	pre := Preamble{Board: sign.PublicKey(), Audience: audience, Kind: kind}
	head := appendPreamble(nil, pre)
	if _, err := w.Write(head); err != nil {
		return nil, fmt.Errorf("write stream: %w", err)
	}
	fw, _ := flate.NewWriter(w, compressLevel) // the level is valid
	wr := &Writer{w: w, fw: fw, sign: sign, pre: pre, digest: sha256.New()}
	wr.digest.Write(head)
	return wr, nil
}

func appendPreamble(b []byte, p Preamble) []byte {
	b = append(b, Magic...)
	b = append(b, p.Board...)
	b = binary.AppendUvarint(b, uint64(len(p.Audience)))
	b = append(b, p.Audience...)
	return append(b, p.Kind)
}

// RecordBytes is what a record counts against MaxSegmentBytes: its
// payload, kind, wall time and boot id, and a fixed 256 bytes for what a
// reader holds beside them (the record itself, its hash in hex). Reader
// and Writer count alike, so that what a writer sends is always read, and
// a reader's memory for one segment is bounded by MaxSegmentBytes.
func RecordBytes(r *journal.Record) int {
	return len(r.Payload) + len(r.Kind) + len(r.Wall) + len(r.BootID) + recordOverhead
}

// recordOverhead is RecordBytes' fixed part: a decoded journal.Record
// (about 150 bytes on 64-bit machines) and its 64-byte hex hash.
const recordOverhead = 256

// Segment writes recs (consecutive records of one session read from the
// journal, with their stored hashes) as signed segments and flushes each,
// so that a receiver can store it before the rest arrives: one segment,
// or several when recs exceed MaxSegmentRecords or MaxSegmentBytes.
func (w *Writer) Segment(recs []journal.Record) error {
	if w.err != nil {
		return w.err
	}
	for len(recs) > 0 {
		n, size := 0, 0
		for n < len(recs) && n < MaxSegmentRecords {
			r := &recs[n]
			if len(r.Payload) == 0 || len(r.Payload) > MaxPayload || len(r.Kind) > MaxString || len(r.Wall) > MaxString || len(r.BootID) > MaxString {
				return fmt.Errorf("session %s record %d: payload of %d bytes (1..%d) or a kind, wall time or boot id over %d bytes: the stream cannot carry it",
					r.Session, r.Seq, len(r.Payload), MaxPayload, MaxString)
			}
			if size += RecordBytes(r); size > MaxSegmentBytes && n > 0 {
				break
			}
			n++
		}
		if err := w.segment(recs[:n]); err != nil {
			return err
		}
		recs = recs[n:]
	}
	return nil
}

// segment writes recs, within the limits, as one signed segment.
func (w *Writer) segment(recs []journal.Record) error {
	session := recs[0].Session
	prev, err := decodeHash(recs[0].Prev)
	if err != nil {
		return fmt.Errorf("session %s record %d: previous hash: %w", session, recs[0].Seq, err)
	}
	b := w.buf[:0]
	b = append(b, tagSegment)
	b = appendString(b, session)
	b = binary.AppendUvarint(b, uint64(recs[0].Seq))
	b = append(b, prev...)
	seq, mono := recs[0].Seq-1, int64(0)
	for i := range recs {
		r := &recs[i]
		if r.Session != session {
			return fmt.Errorf("record %d of session %s inside a segment of session %s", r.Seq, r.Session, session)
		}
		h, err := decodeHash(r.Hash)
		if err != nil {
			return fmt.Errorf("session %s record %d: hash: %w", session, r.Seq, err)
		}
		b = append(b, tagRecord)
		b = binary.AppendUvarint(b, uint64(r.Seq-seq))
		b = appendString(b, string(r.Kind))
		b = appendString(b, r.Wall)
		b = binary.AppendVarint(b, r.Mono-mono)
		b = appendString(b, r.BootID)
		b = binary.AppendUvarint(b, uint64(len(r.Payload)))
		b = append(b, r.Payload...)
		b = append(b, h[:fingerprintSize]...)
		seq, mono = r.Seq, r.Mono
		if len(b) > 1<<16 {
			if _, err := w.fw.Write(b); err != nil {
				return w.fail(err)
			}
			b = b[:0]
		}
	}
	head, _ := decodeHash(recs[len(recs)-1].Hash)
	sig := w.sign.Sign(SegmentMessage(w.pre.Board, w.pre.Audience, session, recs[0].Seq, int64(len(recs)), head))
	b = append(b, tagSegmentEnd)
	b = binary.AppendUvarint(b, uint64(len(recs)))
	b = append(b, sig...)
	w.buf = b[:0]
	w.digest.Write(sig)
	w.segs++
	w.recs += int64(len(recs))
	if _, err := w.fw.Write(b); err != nil {
		return w.fail(err)
	}
	if err := w.fw.Flush(); err != nil {
		return w.fail(err)
	}
	return nil
}

func (w *Writer) fail(err error) error {
	w.err = fmt.Errorf("write stream: %w", err)
	return w.err
}

// BundleMessage is what a bundle's closing signature covers:
// "kermalux bundle v2\x00" || SHA-256(preamble || sig_1 || ... || sig_n) ||
// uint64be(segments) || uint64be(records).
func BundleMessage(digest []byte, segments, records int64) []byte {
	m := append([]byte(bundleDomain), digest...)
	m = binary.BigEndian.AppendUint64(m, uint64(segments))
	return binary.BigEndian.AppendUint64(m, uint64(records))
}

// Close writes the closing frame (signed in a bundle) and ends the
// DEFLATE stream. It does not close the underlying writer.
func (w *Writer) Close() error {
	if w.err != nil {
		return w.err
	}
	b := []byte{tagEnd}
	b = binary.AppendUvarint(b, uint64(w.segs))
	b = binary.AppendUvarint(b, uint64(w.recs))
	if w.pre.Kind == KindBundle {
		b = append(b, w.sign.Sign(BundleMessage(w.digest.Sum(nil), w.segs, w.recs))...)
	}
	if _, err := w.fw.Write(b); err != nil {
		return w.fail(err)
	}
	if err := w.fw.Close(); err != nil {
		return w.fail(err)
	}
	return nil
}

// Counts returns the segments and records written so far.
func (w *Writer) Counts() (segments, records int64) { return w.segs, w.recs }

// Reader reads a stream segment by segment.
type Reader struct {
	name   string
	src    *bufio.Reader
	zr     io.ReadCloser
	r      *bufio.Reader
	pre    Preamble
	digest hash.Hash
	segs   int64
	recs   int64
	done   bool
	buf    []byte
	canon  []byte    // scratch for each record's canonical bytes
	last   [2]string // kind and boot id of the record before
}

// ReadPreamble reads only the preamble from r: the board key and audience
// are known after at most a few hundred bytes. name labels errors.
func ReadPreamble(r io.Reader, name string) (*Reader, error) {
	src := bufio.NewReaderSize(r, 64<<10)
	fixed := make([]byte, preambleFixedSize)
	n, err := io.ReadFull(src, fixed)
	if bytes.HasPrefix(fixed[:n], []byte(`{"format":"kermalux-bundle-1"`)) {
		return nil, fmt.Errorf("%s: %w: a version 1 bundle (JSON lines); write it again with this version's 'kermalux bundle'", name, ErrFormat)
	}
	if n < len(Magic) && !bytes.HasPrefix([]byte(Magic), fixed[:n]) || n >= len(Magic) && string(fixed[:len(Magic)]) != Magic || n == 0 {
		return nil, fmt.Errorf("%s: %w (expected %q first)", name, ErrFormat, Magic[:len(Magic)-1])
	}
	if err != nil {
		if errors.Is(err, io.ErrUnexpectedEOF) {
			return nil, fmt.Errorf("%s: %w: ends inside the preamble", name, ErrTruncated)
		}
		return nil, fmt.Errorf("%s: %w", name, err)
	}
	pre := Preamble{Board: ed25519.PublicKey(append([]byte(nil), fixed[len(Magic):]...))}
	alen, err := binary.ReadUvarint(src)
	if err != nil || alen > MaxAudience {
		return nil, fmt.Errorf("%s: %w: audience length", name, ErrCorrupt)
	}
	aud := make([]byte, alen+1)
	if _, err := io.ReadFull(src, aud); err != nil {
		return nil, fmt.Errorf("%s: %w: ends inside the preamble", name, ErrTruncated)
	}
	pre.Audience, pre.Kind = string(aud[:alen]), aud[alen]
	if !utf8.ValidString(pre.Audience) || (pre.Kind != KindPush && pre.Kind != KindBundle) {
		return nil, fmt.Errorf("%s: %w: preamble audience or kind", name, ErrCorrupt)
	}
	rd := &Reader{name: name, src: src, pre: pre, digest: sha256.New()}
	rd.digest.Write(appendPreamble(nil, pre))
	return rd, nil
}

// Name is the name the stream's errors carry.
func (r *Reader) Name() string { return r.name }

// Preamble returns the stream's preamble.
func (r *Reader) Preamble() Preamble { return r.pre }

// Counts returns the segments and records read so far.
func (r *Reader) Counts() (segments, records int64) { return r.segs, r.recs }

// readErr wraps a decoding failure with the stream name and position.
func (r *Reader) readErr(where string, err error) error {
	if errors.Is(err, io.EOF) || errors.Is(err, io.ErrUnexpectedEOF) {
		return fmt.Errorf("%s: %s: %w (copy or send it again)", r.name, where, ErrTruncated)
	}
	if errors.Is(err, ErrCorrupt) || errors.Is(err, ErrProof) {
		return fmt.Errorf("%s: %s: %w", r.name, where, err)
	}
	var fe flate.CorruptInputError
	if errors.As(err, &fe) {
		return fmt.Errorf("%s: %s: %w: compressed data: %w", r.name, where, ErrCorrupt, err)
	}
	return fmt.Errorf("%s: %s: %w", r.name, where, err)
}

// Next reads, decodes and checks one segment: record numbers consecutive,
// every hash recomputed from the contents and the previous hash and
// compared with the board's, a record that differs named. It does not
// check the signature (the store does, against the enrolled key). It
// returns io.EOF after the closing frame, whose counts (and, in a bundle,
// signature against the preamble's key) it checks.
func (r *Reader) Next() (*Segment, error) {
	if r.done {
		return nil, io.EOF
	}
	if r.zr == nil {
		r.zr = flate.NewReader(r.src)
		r.r = bufio.NewReaderSize(r.zr, 64<<10)
	}
	where := fmt.Sprintf("segment %d", r.segs+1)
	tag, err := r.r.ReadByte()
	if err != nil {
		return nil, r.readErr(where, err)
	}
	switch tag {
	case tagEnd:
		return nil, r.end()
	case tagSegment:
	default:
		return nil, r.readErr(where, fmt.Errorf("%w: frame tag %#x, expected a segment", ErrCorrupt, tag))
	}
	seg := &Segment{Board: r.pre.Board, Audience: r.pre.Audience, Index: int(r.segs + 1)}
	if seg.Session, err = r.string("session id"); err != nil {
		return nil, r.readErr(where, err)
	}
	where = fmt.Sprintf("segment %d (session %s)", r.segs+1, seg.Session)
	first, err := binary.ReadUvarint(r.r)
	if err != nil || first < 1 || first > 1<<62 {
		return nil, r.readErr(where, orCorrupt(err, "first record number"))
	}
	var prev [journal.HashSize]byte
	if _, err := io.ReadFull(r.r, prev[:]); err != nil {
		return nil, r.readErr(where, err)
	}
	seg.Prev = hex.EncodeToString(prev[:])
	if first == 1 && prev != [journal.HashSize]byte{} {
		return nil, r.readErr(where, fmt.Errorf("%w: record 1 must follow the zero hash", ErrProof))
	}
	seq, mono, prevHex := int64(first)-1, int64(0), seg.Prev
	var bytesIn int
	for {
		tag, err := r.r.ReadByte()
		if err != nil {
			return nil, r.readErr(where, err)
		}
		if tag == tagSegmentEnd {
			break
		}
		if tag != tagRecord {
			return nil, r.readErr(where, fmt.Errorf("%w: frame tag %#x after record %d", ErrCorrupt, tag, seq))
		}
		if len(seg.Records) == MaxSegmentRecords {
			return nil, r.readErr(where, fmt.Errorf("%w: more than %d records in one segment", ErrCorrupt, MaxSegmentRecords))
		}
		rec, err := r.record(seg.Session, &seq, &mono, prevHex)
		if err != nil {
			return nil, r.readErr(fmt.Sprintf("%s record %d", where, seq), err)
		}
		bytesIn += RecordBytes(&rec)
		if bytesIn > MaxSegmentBytes {
			return nil, r.readErr(where, fmt.Errorf("%w: more than %d bytes of records in one segment", ErrCorrupt, MaxSegmentBytes))
		}
		prevHex = rec.Hash
		seg.Records = append(seg.Records, rec)
	}
	count, err := binary.ReadUvarint(r.r)
	if err != nil {
		return nil, r.readErr(where, orCorrupt(err, "record count"))
	}
	if count != uint64(len(seg.Records)) || count == 0 {
		return nil, r.readErr(where, fmt.Errorf("%w: the segment closes with a count of %d records, it holds %d", ErrProof, count, len(seg.Records)))
	}
	seg.Sig = make([]byte, ed25519.SignatureSize)
	if _, err := io.ReadFull(r.r, seg.Sig); err != nil {
		return nil, r.readErr(where, err)
	}
	r.digest.Write(seg.Sig)
	r.segs++
	r.recs += int64(len(seg.Records))
	return seg, nil
}

// record decodes one record after its tag and checks it against its
// fingerprint; seq and mono advance.
func (r *Reader) record(session string, seq, mono *int64, prev string) (journal.Record, error) {
	d, err := binary.ReadUvarint(r.r)
	if err != nil {
		return journal.Record{}, orCorrupt(err, "record number")
	}
	if d != 1 {
		if d > 1 && d < 1<<40 {
			return journal.Record{}, fmt.Errorf("%w: records %d..%d missing (the next record sent is %d)", ErrProof, *seq+1, *seq+int64(d)-1, *seq+int64(d))
		}
		return journal.Record{}, fmt.Errorf("%w: record number steps by %d, expected 1 (duplicate or out of order)", ErrProof, int64(d))
	}
	*seq++
	rec := journal.Record{Seq: *seq, Session: session, Prev: prev}
	kind, err := r.stringLike("kind", 0)
	if err != nil {
		return rec, err
	}
	rec.Kind = entry.Kind(kind)
	if rec.Wall, err = r.string("wall time"); err != nil {
		return rec, err
	}
	dm, err := binary.ReadVarint(r.r)
	if err != nil {
		return rec, orCorrupt(err, "monotonic time")
	}
	*mono += dm
	rec.Mono = *mono
	if rec.BootID, err = r.stringLike("boot id", 1); err != nil {
		return rec, err
	}
	n, err := binary.ReadUvarint(r.r)
	if err != nil || n > MaxPayload || n == 0 {
		return rec, orCorrupt(err, fmt.Sprintf("payload length (1..%d bytes)", MaxPayload))
	}
	payload := make([]byte, n)
	if _, err := io.ReadFull(r.r, payload); err != nil {
		return rec, err
	}
	if !utf8.Valid(payload) || bytes.IndexByte(payload, 0) >= 0 {
		return rec, fmt.Errorf("%w: payload is not UTF-8 text", ErrCorrupt)
	}
	rec.Payload = payload
	var fp [fingerprintSize]byte
	if _, err := io.ReadFull(r.r, fp[:]); err != nil {
		return rec, err
	}
	if rec.Kind == "" {
		return rec, fmt.Errorf("%w: empty kind", ErrCorrupt)
	}
	r.canon = rec.AppendCanonical(r.canon[:0])
	h := sha256.Sum256(r.canon)
	rec.Hash = hex.EncodeToString(h[:])
	if !bytes.Equal(fp[:], h[:fingerprintSize]) {
		return rec, fmt.Errorf("%w: hash mismatch: the contents hash to %s, the board's record hashes to %s… (the record was changed)",
			ErrProof, short(rec.Hash), hex.EncodeToString(fp[:]))
	}
	return rec, nil
}

// string reads a length-prefixed UTF-8 string without NUL bytes.
func (r *Reader) string(what string) (string, error) { return r.stringLike(what, -1) }

// stringLike is string for a field that mostly repeats the record
// before's (slot 0 the kind, 1 the boot id; -1 none): the same bytes give
// the same string, without a new allocation for each record.
func (r *Reader) stringLike(what string, slot int) (string, error) {
	n, err := binary.ReadUvarint(r.r)
	if err != nil || n > MaxString {
		return "", orCorrupt(err, fmt.Sprintf("%s length (at most %d bytes)", what, MaxString))
	}
	if cap(r.buf) < int(n) {
		r.buf = make([]byte, n)
	}
	b := r.buf[:n]
	if _, err := io.ReadFull(r.r, b); err != nil {
		return "", err
	}
	if slot >= 0 && string(b) == r.last[slot] {
		return r.last[slot], nil
	}
	if !utf8.Valid(b) || bytes.IndexByte(b, 0) >= 0 {
		return "", fmt.Errorf("%w: %s is not UTF-8 text", ErrCorrupt, what)
	}
	if slot < 0 {
		return string(b), nil
	}
	r.last[slot] = string(b)
	return r.last[slot], nil
}

func (r *Reader) end() error {
	where := "closing frame"
	segs, err := binary.ReadUvarint(r.r)
	if err != nil {
		return r.readErr(where, orCorrupt(err, "segment count"))
	}
	recs, err := binary.ReadUvarint(r.r)
	if err != nil {
		return r.readErr(where, orCorrupt(err, "record count"))
	}
	if segs != uint64(r.segs) || recs != uint64(r.recs) {
		return r.readErr(where, fmt.Errorf("%w: counts %d segments and %d records, the stream held %d and %d (segments removed or added)",
			ErrProof, segs, recs, r.segs, r.recs))
	}
	if r.pre.Kind == KindBundle {
		sig := make([]byte, ed25519.SignatureSize)
		if _, err := io.ReadFull(r.r, sig); err != nil {
			return r.readErr(where, err)
		}
		if !ed25519.Verify(r.pre.Board, BundleMessage(r.digest.Sum(nil), r.segs, r.recs), sig) {
			return r.readErr(where, fmt.Errorf("%w: the bundle signature does not verify with board key %s (segments changed, removed or reordered)",
				ErrProof, short(r.pre.BoardHex())))
		}
	}
	if _, err := r.r.ReadByte(); !errors.Is(err, io.EOF) {
		return r.readErr(where, fmt.Errorf("%w: data after the closing frame", ErrCorrupt))
	}
	r.done = true
	return io.EOF
}

func orCorrupt(err error, what string) error {
	if err != nil && (errors.Is(err, io.EOF) || errors.Is(err, io.ErrUnexpectedEOF)) {
		return err
	}
	return fmt.Errorf("%w: bad %s", ErrCorrupt, what)
}

func appendString(b []byte, s string) []byte {
	b = binary.AppendUvarint(b, uint64(len(s)))
	return append(b, s...)
}

// decodeHash decodes a canonical (lower-case) hex hash.
func decodeHash(s string) ([]byte, error) {
	b, err := hex.DecodeString(s)
	if err != nil || len(b) != journal.HashSize {
		return nil, fmt.Errorf("%q is not %d hex bytes", short(s), journal.HashSize)
	}
	if hex.EncodeToString(b) != s {
		return nil, fmt.Errorf("%q is not canonical lower-case hex", short(s))
	}
	return b, nil
}

func short(h string) string {
	if len(h) > 12 {
		return h[:12] + "…"
	}
	return h
}

// Seal makes a signed segment in memory from records read from the
// journal (for tests and tools that apply segments without a stream): it
// recomputes every hash, as a Reader does, and refuses records whose
// stored hash or chain does not hold.
func Seal(sign Signer, audience string, recs []journal.Record) (*Segment, error) {
	if len(recs) == 0 {
		return nil, errors.New("seal: no records")
	}
	seg := &Segment{Board: sign.PublicKey(), Audience: audience, Session: recs[0].Session, Prev: recs[0].Prev, Index: 1}
	prev := recs[0].Prev
	for i, r := range recs {
		if r.Session != seg.Session || r.Seq != recs[0].Seq+int64(i) || r.Prev != prev {
			return nil, fmt.Errorf("seal: record %d does not follow record %d of session %s", r.Seq, r.Seq-1, seg.Session)
		}
		r.Sig = ""
		h := r.ComputeHash()
		if hex.EncodeToString(h[:]) != r.Hash {
			return nil, fmt.Errorf("seal: session %s record %d: %w: hash mismatch", seg.Session, r.Seq, ErrProof)
		}
		seg.Records = append(seg.Records, r)
		prev = r.Hash
	}
	seg.Sig = sign.Sign(seg.Message())
	return seg, nil
}
