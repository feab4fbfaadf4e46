package journal

import (
	"bytes"
	"context"
	"crypto/ed25519"
	"database/sql"
	"encoding/binary"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"log/slog"
	"os"
	"path/filepath"
	"sync"
	"time"

	"kermalux/drivers/filepos"
)

// The high-water mark: a small signed file beside the journal
// (journal.db.mark) naming the last record the board committed. SQLite
// keeps recent commits in the -wal file; a deleted, cut or damaged WAL, or
// a journal file cut to nothing, takes the last records with it and leaves
// a file that is consistent on its own (chain and signed heads roll back
// together). The mark lives outside the SQLite files, so such a rollback
// is caught: the journal must hold the marked record with the marked hash.
//
// The file holds two slots of markSlot bytes, written in turn (a torn
// write spoils one, the other stays good); each is one JSON object padded
// with spaces:
//
//	{"v":1,"n":COUNTER,"session":ID,"seq":SEQ,"hash":HEX,"sig":HEX}
//
// sig is the board's ed25519 signature of
// "kermalux mark v1\x00" ‖ uint64 n ‖ session ‖ 0x00 ‖ uint64 seq ‖ hash
// (integers big-endian, hash the 32 raw bytes). The slot with a good
// signature and the larger n is the mark.
const (
	markDomain = "kermalux mark v1\x00"
	markSlot   = 1024
	// MarkSuffix is added to the journal's path to name its mark file.
	MarkSuffix = ".mark"
)

// ErrRolledBack means the journal lacks records the board had committed
// (the high-water mark names a record it does not hold, or holds
// differently), or the mark itself is missing or not the board's.
var ErrRolledBack = errors.New("journal rolled back")

// Mark is a decoded high-water mark.
type Mark struct {
	N       uint64 `json:"n"`
	Session string `json:"session"`
	Seq     int64  `json:"seq"`
	Hash    string `json:"hash"`
	Sig     string `json:"sig"`
}

type markJSON struct {
	V int `json:"v"`
	Mark
}

func markMessage(n uint64, session string, seq int64, hash []byte) []byte {
	m := make([]byte, 0, len(markDomain)+8+len(session)+9+len(hash))
	m = append(m, markDomain...)
	m = binary.BigEndian.AppendUint64(m, n)
	m = append(m, session...)
	m = append(m, 0)
	m = binary.BigEndian.AppendUint64(m, uint64(seq))
	return append(m, hash...)
}

// MarkPath is the mark file of the journal at path.
func MarkPath(journalPath string) string { return journalPath + MarkSuffix }

// ReadMark reads the high-water mark of the journal at journalPath and
// checks its signature with pub. It returns nil, nil when there is no mark
// file; an error when the file exists but holds no slot signed by pub.
func ReadMark(journalPath string, pub ed25519.PublicKey) (*Mark, error) {
	p := MarkPath(journalPath)
	data, err := filepos.ReadFile(p, 2*markSlot, "high-water mark")
	if errors.Is(err, fs.ErrNotExist) {
		return nil, nil
	}
	if err != nil {
		// Both the open error and the bound's refusal name the file.
		return nil, fmt.Errorf("high-water mark: %w", err)
	}
	m, err := parseMark(data, pub)
	if err != nil {
		return nil, fmt.Errorf("high-water mark %s: %w", p, err)
	}
	return m, nil
}

// parseMark decodes the bytes of a mark file (see ReadMark).
func parseMark(data []byte, pub ed25519.PublicKey) (*Mark, error) {
	if len(data) > 2*markSlot {
		return nil, fmt.Errorf("%d bytes, a mark file has at most %d", len(data), 2*markSlot)
	}
	var best *Mark
	var why error
	for off := 0; off < len(data); off += markSlot {
		// A slot never written (or zeroed by a cut while the file grew)
		// is empty, not bad.
		slot := bytes.Trim(data[off:min(off+markSlot, len(data))], " \n\x00")
		if len(slot) == 0 {
			continue
		}
		m, err := decodeMark(slot, pub)
		if err != nil {
			why = err
			continue
		}
		if best == nil || m.N > best.N {
			best = m
		}
	}
	if best == nil && why == nil {
		return nil, nil // created, never written: a first start cut short
	}
	if best == nil {
		return nil, fmt.Errorf("no good slot: %w", why)
	}
	return best, nil
}

func decodeMark(slot []byte, pub ed25519.PublicKey) (*Mark, error) {
	var m markJSON
	if err := json.Unmarshal(slot, &m); err != nil {
		return nil, fmt.Errorf("not a mark: %w", err)
	}
	if m.V != 1 {
		return nil, fmt.Errorf("mark version %d, this program reads version 1", m.V)
	}
	h, err := hex.DecodeString(m.Hash)
	if err != nil || len(h) != HashSize {
		return nil, fmt.Errorf("mark hash %q is not %d hex bytes", abbrevHex(m.Hash), HashSize)
	}
	sig, err := hex.DecodeString(m.Sig)
	if err != nil || !ed25519.Verify(pub, markMessage(m.N, m.Session, m.Seq, h), sig) {
		return nil, fmt.Errorf("%w: the mark is not signed by board key %s", ErrBadSignature, abbrevHex(hex.EncodeToString(pub)))
	}
	return &m.Mark, nil
}

// checkMark compares the journal in db with mark m: the marked record must
// be there with the marked hash. It returns "" when it is, else what is
// wrong.
func checkMark(ctx context.Context, db *sql.DB, m *Mark) (string, error) {
	if m.Seq == 0 {
		return "", nil // the genesis mark of a new journal
	}
	var hash string
	err := db.QueryRowContext(ctx, `SELECT hash FROM records WHERE session = ? AND seq = ?`, m.Session, m.Seq).Scan(&hash)
	switch {
	case errors.Is(err, sql.ErrNoRows):
		var last sql.NullInt64
		if err := db.QueryRowContext(ctx, `SELECT max(seq) FROM records WHERE session = ?`, m.Session).Scan(&last); err != nil {
			return "", err
		}
		if !last.Valid {
			return fmt.Sprintf("the high-water mark names record %d of session %s, and the journal holds no record of that session: records the board had committed are gone (a deleted or cut -wal file, or a journal file replaced)", m.Seq, m.Session), nil
		}
		return fmt.Sprintf("the high-water mark names record %d of session %s, and the journal ends that session at record %d: %d committed record(s) are gone (a deleted, cut or damaged -wal file)", m.Seq, m.Session, last.Int64, m.Seq-last.Int64), nil
	case err != nil:
		return "", err
	case hash != m.Hash:
		return fmt.Sprintf("record %d of session %s hashes to %s, but the board committed %s (high-water mark): the journal was rewritten", m.Seq, m.Session, abbrevHex(hash), abbrevHex(m.Hash)), nil
	}
	return "", nil
}

// markPause is the least time between two writes of the mark: at high
// append rates its flush to disk would otherwise come between every two
// commits of the journal, each waiting for the other's. A mark that
// arrives after a quiet spell is written at once.
const markPause = 5 * time.Millisecond

// markWriter keeps the mark file up to date in the background: Append
// hands it each committed head and returns at once; the writer coalesces
// what arrives while it writes and for markPause after, so the mark trails
// the journal by at most the records of the last few milliseconds. The
// mark is only ever written for committed records, so it is never ahead of
// the journal; flush (SyncMark) and Close write the last head at once.
type markWriter struct {
	path string
	priv ed25519.PrivateKey
	f    *os.File

	mu      sync.Mutex
	cond    *sync.Cond
	pending *Mark
	n       uint64 // counter of the last mark; mark n goes to slot n % 2
	writing bool
	closed  bool
	done    chan struct{}
	hurry   chan struct{} // cuts markPause short (flush, close)
	written int           // marks written since start (for tests)
}

// startMarkWriter opens the mark file; with no mark yet (a new journal)
// it first writes, and syncs, the genesis mark (record 0 of no session),
// so that from the first record on a missing mark means a deleted one.
func startMarkWriter(path string, priv ed25519.PrivateKey, last *Mark) (*markWriter, error) {
	f, err := os.OpenFile(path, os.O_RDWR|os.O_CREATE, 0o644)
	if err != nil {
		return nil, fmt.Errorf("high-water mark: %w", err)
	}
	if d, err := os.Open(filepath.Dir(path)); err == nil {
		d.Sync() // the new file's name is durable
		d.Close()
	}
	w := &markWriter{path: path, priv: priv, f: f, done: make(chan struct{}), hurry: make(chan struct{}, 1)}
	w.cond = sync.NewCond(&w.mu)
	if last != nil {
		w.n = last.N
	} else {
		w.n = 1
		if err := w.write(&Mark{N: 1, Hash: zeroHashHex()}); err != nil {
			f.Close()
			return nil, fmt.Errorf("high-water mark %s: %w", path, err)
		}
	}
	go w.loop()
	return w, nil
}

// flush waits until every noted head is in the file.
func (w *markWriter) flush() {
	w.poke()
	w.mu.Lock()
	for w.pending != nil || w.writing {
		w.cond.Wait()
	}
	w.mu.Unlock()
}

// note records that (session, seq, hash) is committed.
func (w *markWriter) note(session string, seq int64, hash string) {
	w.mu.Lock()
	w.n++
	w.pending = &Mark{N: w.n, Session: session, Seq: seq, Hash: hash}
	w.cond.Broadcast()
	w.mu.Unlock()
}

// poke cuts the writer's pause short.
func (w *markWriter) poke() {
	select {
	case w.hurry <- struct{}{}:
	default:
	}
}

func (w *markWriter) loop() {
	defer close(w.done)
	for {
		w.mu.Lock()
		for w.pending == nil && !w.closed {
			w.cond.Wait()
		}
		m := w.pending
		w.pending = nil
		closed := w.closed
		w.writing = m != nil
		w.mu.Unlock()
		if m != nil {
			if err := w.write(m); err != nil {
				slog.Warn("journal high-water mark not written", "path", w.path, "err", err)
			}
			w.mu.Lock()
			w.writing = false
			w.written++
			w.cond.Broadcast()
			w.mu.Unlock()
		}
		if closed && m == nil {
			return
		}
		if m != nil && !closed {
			t := time.NewTimer(markPause)
			select {
			case <-t.C:
			case <-w.hurry:
				t.Stop()
			}
		}
	}
}

func (w *markWriter) write(m *Mark) error {
	h, err := hex.DecodeString(m.Hash)
	if err != nil {
		return err
	}
	m.Sig = hex.EncodeToString(ed25519.Sign(w.priv, markMessage(m.N, m.Session, m.Seq, h)))
	b, err := json.Marshal(markJSON{V: 1, Mark: *m})
	if err != nil {
		return err
	}
	if len(b) >= markSlot {
		return fmt.Errorf("session id of %d bytes too long for a mark", len(m.Session))
	}
	slot := bytes.Repeat([]byte{' '}, markSlot)
	copy(slot, b)
	slot[markSlot-1] = '\n'
	if _, err := w.f.WriteAt(slot, int64(m.N%2)*markSlot); err != nil {
		return err
	}
	return datasync(w.f)
}

// close writes what is pending and closes the file.
func (w *markWriter) close() error {
	w.mu.Lock()
	w.closed = true
	w.cond.Broadcast()
	w.mu.Unlock()
	w.poke()
	<-w.done
	return w.f.Close()
}

// SyncMark waits until the high-water mark names the last committed
// record (it trails commits by milliseconds otherwise), e.g. before the
// board tells the engineer the session is safe to leave.
func (j *Journal) SyncMark() { j.mark.flush() }
