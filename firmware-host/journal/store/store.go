// Package store is the workstation's store: one SQLite file keeping every
// enrolled board's sessions and records as received by push or import,
// with indexes for queries by site, room, intensifier serial and date, and
// a results table for fast history (trends of one intensifier over years).
//
// Every batch is checked before anything of it is stored (board enrolled,
// batch and record signatures, hashes, chain continuity with what is
// stored) and applied in one transaction: a batch is stored whole or not
// at all.
package store

import (
	"context"
	"crypto/ed25519"
	"database/sql"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"strings"
	"time"

	_ "modernc.org/sqlite" // pure-Go SQLite driver "sqlite"

	"kermalux/firmware-host/journal"
	"kermalux/procedures/entry"
)

// SchemaVersion is the store file's schema version.
const SchemaVersion = 1

// Reasons a batch is refused; test with errors.Is.
var (
	ErrNotEnrolled = errors.New("board not enrolled")
	ErrRefused     = errors.New("batch refused")
	ErrReplay      = errors.New("replayed batch: every record already stored")
	ErrGap         = errors.New("batch does not continue what is stored")
	ErrConflict    = errors.New("record differs from the stored record with the same number")
)

// Store is an open workstation store.
type Store struct {
	path string
	db   *sql.DB
}

const schemaSQL = `
CREATE TABLE IF NOT EXISTS schema_version(version INTEGER NOT NULL, created TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS boards(
	key      TEXT PRIMARY KEY,
	name     TEXT NOT NULL,
	enrolled TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS sessions(
	id          TEXT PRIMARY KEY,
	board       TEXT NOT NULL REFERENCES boards(key),
	site        TEXT NOT NULL,
	room        TEXT NOT NULL,
	model       TEXT NOT NULL,
	serial      TEXT NOT NULL,
	started_ns  INTEGER NOT NULL,
	payload     TEXT NOT NULL,
	high        INTEGER NOT NULL,
	head        TEXT NOT NULL,
	ended       INTEGER NOT NULL DEFAULT 0,
	end_payload TEXT,
	received    TEXT NOT NULL);
CREATE INDEX IF NOT EXISTS sessions_site    ON sessions(site, started_ns);
CREATE INDEX IF NOT EXISTS sessions_room    ON sessions(site, room, started_ns);
CREATE INDEX IF NOT EXISTS sessions_serial  ON sessions(serial, started_ns);
CREATE INDEX IF NOT EXISTS sessions_started ON sessions(started_ns);
CREATE TABLE IF NOT EXISTS records(
	session TEXT NOT NULL,
	seq     INTEGER NOT NULL,
	kind    TEXT NOT NULL,
	wall    TEXT NOT NULL,
	mono_ns INTEGER NOT NULL,
	boot_id TEXT NOT NULL,
	payload TEXT NOT NULL,
	prev    TEXT NOT NULL,
	hash    TEXT NOT NULL,
	sig     TEXT NOT NULL);
CREATE UNIQUE INDEX IF NOT EXISTS records_seq ON records(session, seq);
CREATE TABLE IF NOT EXISTS results(
	session    TEXT NOT NULL,
	seq        INTEGER NOT NULL,
	serial     TEXT NOT NULL,
	started_ns INTEGER NOT NULL,
	quantity   TEXT NOT NULL,
	field_mode TEXT NOT NULL,
	value      REAL NOT NULL,
	verdict    TEXT NOT NULL,
	payload    TEXT NOT NULL);
CREATE UNIQUE INDEX IF NOT EXISTS results_seq ON results(session, seq);
CREATE INDEX IF NOT EXISTS results_serial ON results(serial, started_ns, quantity);
`

// Open opens or creates the store at path.
func Open(path string) (*Store, error) {
	if strings.ContainsRune(path, '?') {
		return nil, fmt.Errorf("open store %s: a '?' in the path is not supported", path)
	}
	db, err := sql.Open("sqlite", "file:"+path+"?_pragma=busy_timeout(10000)&_pragma=journal_mode(WAL)&_pragma=synchronous(FULL)&_pragma=foreign_keys(1)&_txlock=immediate")
	if err != nil {
		return nil, fmt.Errorf("open store %s: %w", path, err)
	}
	db.SetMaxOpenConns(1)
	s := &Store{path: path, db: db}
	if err := s.init(); err != nil {
		db.Close()
		return nil, fmt.Errorf("open store %s: %w", path, err)
	}
	return s, nil
}

func (s *Store) init() error {
	tx, err := s.db.Begin()
	if err != nil {
		return err
	}
	defer tx.Rollback()
	if _, err := tx.Exec(schemaSQL); err != nil {
		return fmt.Errorf("create schema: %w", err)
	}
	var v int
	switch err := tx.QueryRow(`SELECT version FROM schema_version`).Scan(&v); {
	case errors.Is(err, sql.ErrNoRows):
		if _, err := tx.Exec(`INSERT INTO schema_version VALUES (?, ?)`, SchemaVersion, time.Now().UTC().Format(time.RFC3339)); err != nil {
			return err
		}
	case err != nil:
		return fmt.Errorf("read schema version: %w", err)
	case v != SchemaVersion:
		return fmt.Errorf("schema version %d, this program reads version %d", v, SchemaVersion)
	}
	return tx.Commit()
}

// Path is the store file.
func (s *Store) Path() string { return s.path }

// Close closes the store.
func (s *Store) Close() error { return s.db.Close() }

// Board is an enrolled board.
type Board struct {
	Key      string    `json:"key"` // hex ed25519 public key
	Name     string    `json:"name"`
	Enrolled time.Time `json:"enrolled"`
}

// Enroll admits a board's public key under name (re-enrolling a key
// renames it). Only enrolled boards' batches are accepted.
func (s *Store) Enroll(ctx context.Context, key ed25519.PublicKey, name string) error {
	if len(key) != ed25519.PublicKeySize {
		return fmt.Errorf("enroll %q: key is %d bytes, expected %d", name, len(key), ed25519.PublicKeySize)
	}
	if strings.TrimSpace(name) == "" {
		return fmt.Errorf("enroll: a board name is required")
	}
	_, err := s.db.ExecContext(ctx, `INSERT INTO boards VALUES (?, ?, ?) ON CONFLICT(key) DO UPDATE SET name = excluded.name`,
		hex.EncodeToString(key), name, time.Now().UTC().Format(time.RFC3339))
	if err != nil {
		return fmt.Errorf("enroll %q in %s: %w", name, s.path, err)
	}
	return nil
}

// Boards lists enrolled boards.
func (s *Store) Boards(ctx context.Context) ([]Board, error) {
	rows, err := s.db.QueryContext(ctx, `SELECT key, name, enrolled FROM boards ORDER BY name`)
	if err != nil {
		return nil, fmt.Errorf("list boards: %w", err)
	}
	defer rows.Close()
	var out []Board
	for rows.Next() {
		var b Board
		var at string
		if err := rows.Scan(&b.Key, &b.Name, &at); err != nil {
			return nil, fmt.Errorf("list boards: %w", err)
		}
		b.Enrolled, _ = time.Parse(time.RFC3339, at)
		out = append(out, b)
	}
	return out, rows.Err()
}

func boardKey(ctx context.Context, q queryRower, key string) (ed25519.PublicKey, string, error) {
	var name string
	err := q.QueryRowContext(ctx, `SELECT name FROM boards WHERE key = ?`, key).Scan(&name)
	if errors.Is(err, sql.ErrNoRows) {
		return nil, "", fmt.Errorf("%w: board key %s is not enrolled in this store (enroll it first: kermalux enroll --store STORE --key %s --name NAME)", ErrNotEnrolled, shortKey(key), key)
	}
	if err != nil {
		return nil, "", err
	}
	pub, err := journal.ParsePublicKey(key)
	if err != nil {
		return nil, "", fmt.Errorf("%w: %w", ErrRefused, err)
	}
	return pub, name, nil
}

type queryRower interface {
	QueryRowContext(ctx context.Context, q string, args ...any) *sql.Row
}

func shortKey(k string) string {
	if len(k) > 16 {
		return k[:16] + "…"
	}
	return k
}

// Marks returns the workstation's high-water mark (last stored seq, 0 for
// none) of each of the board's sessions, for a push to resume from.
func (s *Store) Marks(ctx context.Context, board string, sessions []string) (map[string]int64, error) {
	if _, _, err := boardKey(ctx, s.db, board); err != nil {
		return nil, err
	}
	out := make(map[string]int64, len(sessions))
	for _, id := range sessions {
		var owner string
		var high int64
		err := s.db.QueryRowContext(ctx, `SELECT board, high FROM sessions WHERE id = ?`, id).Scan(&owner, &high)
		switch {
		case errors.Is(err, sql.ErrNoRows):
			out[id] = 0
		case err != nil:
			return nil, fmt.Errorf("marks: %w", err)
		case owner != board:
			return nil, fmt.Errorf("%w: session %s belongs to another board", ErrRefused, id)
		default:
			out[id] = high
		}
	}
	return out, nil
}

// Applied says what Apply did with a batch.
type Applied struct {
	Stored     int   `json:"stored"`     // new records stored
	Duplicates int   `json:"duplicates"` // records already stored, identical
	High       int64 `json:"high"`       // high-water mark of the session afterwards
}

// Apply checks a batch and stores its new records in one transaction. A
// batch whose records are all already stored is refused with ErrReplay
// (nothing stored); a batch that overlaps what is stored and continues it
// stores only the new records (each record is stored once).
func (s *Store) Apply(ctx context.Context, b *journal.Batch) (Applied, error) {
	tx, err := s.db.BeginTx(ctx, nil)
	if err != nil {
		return Applied{}, fmt.Errorf("store %s: %w", s.path, err)
	}
	defer tx.Rollback()
	a, err := applyTx(ctx, tx, b)
	if err != nil {
		return a, err
	}
	if err := tx.Commit(); err != nil {
		return Applied{}, fmt.Errorf("store %s: %w", s.path, err)
	}
	return a, nil
}

// ApplyOptions configure ApplyAll.
type ApplyOptions struct {
	// SkipReplays counts a batch already wholly stored as duplicates
	// instead of failing (importing the same bundle twice).
	SkipReplays bool
	// Progress, if set, is told the records of each batch checked.
	Progress func(records int)
}

// BatchError names which batch of ApplyAll failed.
type BatchError struct {
	Index int // 0-based
	Err   error
}

func (e *BatchError) Error() string { return fmt.Sprintf("batch %d: %v", e.Index+1, e.Err) }
func (e *BatchError) Unwrap() error { return e.Err }

// ApplyAll applies batches in one transaction, all or nothing: the fast
// bulk path (one commit for any number of batches) and the import of a
// bundle.
func (s *Store) ApplyAll(ctx context.Context, batches []*journal.Batch, opts ApplyOptions) (Applied, error) {
	tx, err := s.db.BeginTx(ctx, nil)
	if err != nil {
		return Applied{}, fmt.Errorf("store %s: %w", s.path, err)
	}
	defer tx.Rollback()
	var sum Applied
	for i, b := range batches {
		a, err := applyTx(ctx, tx, b)
		if opts.Progress != nil {
			opts.Progress(len(b.Records))
		}
		if errors.Is(err, ErrReplay) && opts.SkipReplays {
			sum.Duplicates += len(b.Records)
			continue
		}
		if err != nil {
			return Applied{}, &BatchError{Index: i, Err: err}
		}
		sum.Stored += a.Stored
		sum.Duplicates += a.Duplicates
		sum.High = a.High
	}
	if err := tx.Commit(); err != nil {
		return Applied{}, fmt.Errorf("store %s: %w", s.path, err)
	}
	return sum, nil
}

func applyTx(ctx context.Context, tx *sql.Tx, b *journal.Batch) (Applied, error) {
	var a Applied
	what := fmt.Sprintf("batch of session %s records %d..%d", b.Session, b.First(), b.Last())
	refuse := func(kind error, format string, args ...any) (Applied, error) {
		return Applied{}, fmt.Errorf("%w: %s: %s", kind, what, fmt.Sprintf(format, args...))
	}
	pub, _, err := boardKey(ctx, tx, b.Board)
	if err != nil {
		return Applied{}, err
	}
	if err := b.CheckSigned(pub); err != nil {
		return refuse(ErrRefused, "%v", err)
	}
	var (
		owner, head, sessPayload string
		high, startedNs          int64
		ended                    bool
		serial                   string
	)
	err = tx.QueryRowContext(ctx, `SELECT board, high, head, ended, serial, started_ns, payload FROM sessions WHERE id = ?`, b.Session).
		Scan(&owner, &high, &head, &ended, &serial, &startedNs, &sessPayload)
	switch {
	case errors.Is(err, sql.ErrNoRows):
		high, head = 0, journal.ZeroHash()
	case err != nil:
		return Applied{}, err
	case owner != b.Board:
		return refuse(ErrRefused, "the session belongs to board %s", shortKey(owner))
	}
	// Records already stored must be identical.
	for i := range b.Records {
		r := &b.Records[i]
		if r.Seq > high {
			break
		}
		var h string
		if err := tx.QueryRowContext(ctx, `SELECT hash FROM records WHERE session = ? AND seq = ?`, b.Session, r.Seq).Scan(&h); err != nil {
			return Applied{}, fmt.Errorf("%s: read stored record %d: %w", what, r.Seq, err)
		}
		if h != r.Hash {
			return refuse(ErrConflict, "record %d hashes to %s, the stored one to %s", r.Seq, shortKey(r.Hash), shortKey(h))
		}
		a.Duplicates++
	}
	if b.Last() <= high {
		return refuse(ErrReplay, "high-water mark is %d; nothing stored", high)
	}
	if b.First() > high+1 {
		return refuse(ErrGap, "the store holds records up to %d; send from %d", high, high+1)
	}
	fresh := b.Records[high-b.First()+1:]
	if fresh[0].Prev != head {
		return refuse(ErrRefused, "record %d: previous hash %s does not match stored record %d (%s)", fresh[0].Seq, shortKey(fresh[0].Prev), high, shortKey(head))
	}
	if ended {
		return refuse(ErrRefused, "the session already ended at record %d", high)
	}
	ins, err := tx.PrepareContext(ctx, `INSERT INTO records VALUES (?,?,?,?,?,?,?,?,?,?)`)
	if err != nil {
		return Applied{}, err
	}
	defer ins.Close()
	for i := range fresh {
		r := &fresh[i]
		if _, err := ins.ExecContext(ctx, r.Session, r.Seq, string(r.Kind), r.Wall, r.Mono, r.BootID, string(r.Payload), r.Prev, r.Hash, r.Sig); err != nil {
			return Applied{}, fmt.Errorf("%s: store record %d: %w", what, r.Seq, err)
		}
		switch r.Kind {
		case entry.KindSession:
			var ss entry.Session
			if err := json.Unmarshal(r.Payload, &ss); err != nil {
				return refuse(ErrRefused, "record 1: %v", err)
			}
			serial, startedNs = ss.IntensifierSerial, ss.Started.UnixNano()
			if _, err := tx.ExecContext(ctx, `INSERT INTO sessions(id, board, site, room, model, serial, started_ns, payload, high, head, received)
				VALUES (?,?,?,?,?,?,?,?,0,?,?)`, b.Session, b.Board, ss.Site, ss.Room, ss.IntensifierModel, ss.IntensifierSerial,
				startedNs, string(r.Payload), journal.ZeroHash(), time.Now().UTC().Format(time.RFC3339)); err != nil {
				return Applied{}, fmt.Errorf("%s: store session: %w", what, err)
			}
		case entry.KindResult:
			var res entry.Result
			if err := json.Unmarshal(r.Payload, &res); err != nil {
				return refuse(ErrRefused, "record %d: %v", r.Seq, err)
			}
			if _, err := tx.ExecContext(ctx, `INSERT INTO results VALUES (?,?,?,?,?,?,?,?,?)`, r.Session, r.Seq, serial, startedNs,
				res.Quantity, res.FieldMode, res.Value, res.Verdict, string(r.Payload)); err != nil {
				return Applied{}, fmt.Errorf("%s: store result %d: %w", what, r.Seq, err)
			}
		case entry.KindSessionEnd:
			if _, err := tx.ExecContext(ctx, `UPDATE sessions SET ended = 1, end_payload = ? WHERE id = ?`, string(r.Payload), b.Session); err != nil {
				return Applied{}, fmt.Errorf("%s: store session end: %w", what, err)
			}
		}
		a.Stored++
	}
	last := fresh[len(fresh)-1]
	if _, err := tx.ExecContext(ctx, `UPDATE sessions SET high = ?, head = ? WHERE id = ?`, last.Seq, last.Hash, b.Session); err != nil {
		return Applied{}, fmt.Errorf("%s: %w", what, err)
	}
	a.High = last.Seq
	return a, nil
}

// Query selects sessions; empty fields and zero times match everything.
// From is inclusive, To exclusive, compared with the session's start.
type Query struct {
	Site, Room, Serial string
	From, To           time.Time
}

// SessionInfo describes a stored session.
type SessionInfo struct {
	ID        string
	BoardKey  string
	BoardName string
	Session   entry.Session
	End       *entry.SessionEnd // nil while the session has no session_end
	Records   int64             // records stored (the high-water mark)
}

// Sessions returns the sessions matching q, oldest first.
func (s *Store) Sessions(ctx context.Context, q Query) ([]SessionInfo, error) {
	var where []string
	var args []any
	if q.Site != "" {
		where, args = append(where, "s.site = ?"), append(args, q.Site)
	}
	if q.Room != "" {
		where, args = append(where, "s.room = ?"), append(args, q.Room)
	}
	if q.Serial != "" {
		where, args = append(where, "s.serial = ?"), append(args, q.Serial)
	}
	if !q.From.IsZero() {
		where, args = append(where, "s.started_ns >= ?"), append(args, q.From.UnixNano())
	}
	if !q.To.IsZero() {
		where, args = append(where, "s.started_ns < ?"), append(args, q.To.UnixNano())
	}
	sqlq := `SELECT s.id, s.board, b.name, s.payload, s.end_payload, s.high FROM sessions s JOIN boards b ON b.key = s.board`
	if len(where) > 0 {
		sqlq += " WHERE " + strings.Join(where, " AND ")
	}
	sqlq += " ORDER BY s.started_ns, s.id"
	rows, err := s.db.QueryContext(ctx, sqlq, args...)
	if err != nil {
		return nil, fmt.Errorf("store %s: sessions: %w", s.path, err)
	}
	defer rows.Close()
	var out []SessionInfo
	for rows.Next() {
		var si SessionInfo
		var payload string
		var end sql.NullString
		if err := rows.Scan(&si.ID, &si.BoardKey, &si.BoardName, &payload, &end, &si.Records); err != nil {
			return nil, fmt.Errorf("store %s: sessions: %w", s.path, err)
		}
		if err := json.Unmarshal([]byte(payload), &si.Session); err != nil {
			return nil, fmt.Errorf("store %s: session %s record 1: %w", s.path, si.ID, err)
		}
		if end.Valid {
			si.End = new(entry.SessionEnd)
			if err := json.Unmarshal([]byte(end.String), si.End); err != nil {
				return nil, fmt.Errorf("store %s: session %s end: %w", s.path, si.ID, err)
			}
		}
		out = append(out, si)
	}
	return out, rows.Err()
}

// Records returns up to limit stored records of session after seq after
// (limit <= 0: all), with hashes and signatures.
func (s *Store) Records(ctx context.Context, session string, after int64, limit int) ([]journal.Record, error) {
	if limit <= 0 {
		limit = -1
	}
	rows, err := s.db.QueryContext(ctx, `SELECT session, seq, kind, wall, mono_ns, boot_id, payload, prev, hash, sig
		FROM records WHERE session = ? AND seq > ? ORDER BY seq LIMIT ?`, session, after, limit)
	if err != nil {
		return nil, fmt.Errorf("store %s: records of %s: %w", s.path, session, err)
	}
	defer rows.Close()
	var out []journal.Record
	for rows.Next() {
		var r journal.Record
		var kind, payload string
		if err := rows.Scan(&r.Session, &r.Seq, &kind, &r.Wall, &r.Mono, &r.BootID, &payload, &r.Prev, &r.Hash, &r.Sig); err != nil {
			return nil, fmt.Errorf("store %s: records of %s: %w", s.path, session, err)
		}
		r.Kind, r.Payload = entry.Kind(kind), json.RawMessage(payload)
		out = append(out, r)
	}
	return out, rows.Err()
}

// Envelopes returns every stored record of session for the report.
func (s *Store) Envelopes(ctx context.Context, session string) ([]entry.Envelope, error) {
	recs, err := s.Records(ctx, session, 0, 0)
	if err != nil {
		return nil, err
	}
	if len(recs) == 0 {
		return nil, fmt.Errorf("store %s: no session %s", s.path, session)
	}
	out := make([]entry.Envelope, len(recs))
	for i := range recs {
		if out[i], err = recs[i].Envelope(); err != nil {
			return nil, fmt.Errorf("store %s: session %s: %w", s.path, session, err)
		}
	}
	return out, nil
}

// HistoryPoint is one result of one session of an intensifier.
type HistoryPoint struct {
	Session string
	Date    time.Time // session start
	Site    string
	Room    string
	Result  entry.Result
}

// History returns every result recorded for the intensifier serial, oldest
// session first, in record order within a session.
func (s *Store) History(ctx context.Context, serial string) ([]HistoryPoint, error) {
	rows, err := s.db.QueryContext(ctx, `SELECT r.session, r.started_ns, s.site, s.room, r.payload
		FROM results r JOIN sessions s ON s.id = r.session
		WHERE r.serial = ? ORDER BY r.started_ns, r.session, r.seq`, serial)
	if err != nil {
		return nil, fmt.Errorf("store %s: history of %s: %w", s.path, serial, err)
	}
	defer rows.Close()
	var out []HistoryPoint
	for rows.Next() {
		var h HistoryPoint
		var ns int64
		var payload string
		if err := rows.Scan(&h.Session, &ns, &h.Site, &h.Room, &payload); err != nil {
			return nil, fmt.Errorf("store %s: history of %s: %w", s.path, serial, err)
		}
		h.Date = time.Unix(0, ns).UTC()
		if err := json.Unmarshal([]byte(payload), &h.Result); err != nil {
			return nil, fmt.Errorf("store %s: history of %s: session %s: %w", s.path, serial, h.Session, err)
		}
		out = append(out, h)
	}
	return out, rows.Err()
}

// Exists reports whether path exists (for commands that must not create a
// store by mistake).
func Exists(path string) bool {
	_, err := os.Stat(path)
	return err == nil
}
