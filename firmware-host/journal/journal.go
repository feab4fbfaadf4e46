// Package journal is the board's session journal: every prompt, answer,
// reading, step transition and result of a session, one SQLite transaction
// per record (WAL, synchronous=FULL), so a record is on disk when Append
// returns and survives a power cut. Records of a session form a SHA-256
// hash chain and each is signed with the board's ed25519 key, so a copy of
// the journal, a sync batch or a bundle can be checked anywhere against the
// board's public key. FORMAT.md describes the file and the hashes exactly.
package journal

import (
	"context"
	"crypto/ed25519"
	"crypto/rand"
	"database/sql"
	"database/sql/driver"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"time"

	"modernc.org/sqlite" // pure-Go SQLite driver "sqlite"

	"kermalux/drivers/clock"
	"kermalux/procedures/entry"
)

// SchemaVersion is the journal file's schema version (table schema_version).
const SchemaVersion = 1

// Errors callers can test with errors.Is.
var (
	ErrUnknownSession = errors.New("unknown session")
	ErrSessionEnded   = errors.New("session already ended")
	ErrHashMismatch   = errors.New("hash mismatch")
	ErrBadSignature   = errors.New("bad signature")
	ErrChainBroken    = errors.New("chain broken")
	ErrWrongBoard     = errors.New("journal belongs to another board")
)

// Options configure Open.
type Options struct {
	// KeyPath is the board's private key file. If empty, KeyDir/board.key;
	// if KeyDir is empty too, "board-key/board.key" beside the journal.
	// The key is created on first start (file 0600 in a 0700 directory).
	KeyPath string
	KeyDir  string
	// BootID returns the current boot's id; default reads
	// /proc/sys/kernel/random/boot_id (Linux), "unknown" elsewhere.
	BootID func() string
	// SoftwareVersion is written into sessions that do not set one.
	SoftwareVersion string
	// Clock gives wall and monotonic times; default the real clock.
	Clock clock.Clock
}

// KeyFile returns the key path these options select for journal path.
func (o Options) KeyFile(journalPath string) string {
	switch {
	case o.KeyPath != "":
		return o.KeyPath
	case o.KeyDir != "":
		return filepath.Join(o.KeyDir, KeyFileName)
	default:
		return filepath.Join(filepath.Dir(journalPath), "board-key", KeyFileName)
	}
}

// Journal is an open board journal. Its methods are safe for concurrent
// use; one process should write a journal file at a time.
type Journal struct {
	closeOnce sync.Once
	closeErr  error

	path   string
	db     *sql.DB
	priv   ed25519.PrivateKey
	signer *signer // the appends' signatures, their nonces made ahead (sign.go)
	pub    ed25519.PublicKey
	pubHex string
	clk    clock.Clock
	boot   string
	soft   string
	mu     sync.Mutex
	// Prepared once: the append path runs them at every append. put
	// inserts a record through the connection's append view (appendSQL).
	head, put *sql.Stmt
	// heads caches each session's head as last committed by this Journal
	// (under mu), so an append need not read it back. A session not in the
	// cache is read from the file; any failed append drops its entry. A
	// stale entry (another process appending to the same session) cannot
	// fork the chain: the unique (session, seq) index refuses the insert.
	heads map[string]headState
	// mark keeps the high-water mark file (mark.go) behind each commit.
	mark *markWriter
}

// headState is a session's last record: its seq and hash, and whether it
// was the session end.
type headState struct {
	seq   int64
	hash  string
	ended bool
}

const schemaSQL = `
CREATE TABLE IF NOT EXISTS schema_version(
	version  INTEGER NOT NULL,
	software TEXT NOT NULL,
	created  TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS board(
	id         INTEGER PRIMARY KEY CHECK (id = 1),
	public_key TEXT NOT NULL);
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
CREATE TABLE IF NOT EXISTS heads(
	session  TEXT PRIMARY KEY,
	seq      INTEGER NOT NULL,
	hash     TEXT NOT NULL,
	head_sig TEXT NOT NULL,
	ended    INTEGER NOT NULL DEFAULT 0);
`

// appendSQL is what each writing connection creates in its own TEMP
// schema (never in the journal file, whose format it does not touch): a
// view to insert through, whose trigger writes the record and its
// session's signed head in the one statement. A single record's append is
// then that one statement in SQLite's autocommit mode, one transaction
// and one fsync as before, without the BEGIN and COMMIT statements the
// pure-Go driver prepares and runs for every transaction (about a fifth
// of the append's time beside the fsync, measured with
// BenchmarkDurableAppend). The trigger also refuses a record that does
// not follow its session's head (seq, prev, ended), whatever the caller
// believes the head to be.
const appendSQL = `
CREATE TEMP VIEW append_record(session, seq, kind, wall, mono_ns, boot_id, payload, prev, hash, sig, head_sig)
	AS SELECT NULL, NULL, NULL, NULL, NULL, NULL, NULL, NULL, NULL, NULL, NULL WHERE 0;
CREATE TEMP TRIGGER append_record_insert INSTEAD OF INSERT ON append_record BEGIN
	SELECT RAISE(ABORT, 'the record does not follow its session''s head')
		WHERE NOT EXISTS (SELECT 1 FROM main.heads h WHERE h.session = NEW.session AND h.seq + 1 = NEW.seq AND h.hash = NEW.prev AND NOT h.ended)
		AND NOT (NEW.seq = 1 AND NOT EXISTS (SELECT 1 FROM main.heads h WHERE h.session = NEW.session));
	INSERT INTO main.records VALUES (NEW.session, NEW.seq, NEW.kind, NEW.wall, NEW.mono_ns, NEW.boot_id, NEW.payload, NEW.prev, NEW.hash, NEW.sig);
	INSERT INTO main.heads(session, seq, hash, head_sig, ended) VALUES (NEW.session, NEW.seq, NEW.hash, NEW.head_sig, NEW.kind = 'session_end')
		ON CONFLICT(session) DO UPDATE SET seq = excluded.seq, hash = excluded.hash, head_sig = excluded.head_sig, ended = excluded.ended;
END;
`

// appendConnector opens the journal's writing connections, each with the
// append view of appendSQL in its TEMP schema (database/sql may replace a
// broken connection; the new one gets the view too).
type appendConnector struct{ driver.Connector }

// Connect opens a connection and creates the append view on it.
func (c appendConnector) Connect(ctx context.Context) (driver.Conn, error) {
	conn, err := c.Connector.Connect(ctx)
	if err != nil {
		return nil, err
	}
	ex, ok := conn.(driver.ExecerContext)
	if !ok {
		conn.Close()
		return nil, errors.New("the SQLite driver's connection cannot execute statements")
	}
	if _, err := ex.ExecContext(ctx, appendSQL, nil); err != nil {
		conn.Close()
		return nil, fmt.Errorf("create the append view: %w", err)
	}
	return conn, nil
}

func dsn(path string, write bool) string {
	q := "_pragma=busy_timeout(10000)"
	if !write {
		// A reader never writes: no checkpoint, no deleting the -wal.
		q = "mode=ro&" + q
	}
	if write {
		// The board appends; a small page cache (512 KiB) keeps its memory low.
		q += "&_pragma=journal_mode(WAL)&_pragma=synchronous(FULL)&_pragma=cache_size(-512)&_txlock=immediate"
	}
	return "file:" + path + "?" + q
}

// Open opens or creates the journal at path with the board key the options
// select (creating the key on first start).
func Open(path string, opts Options) (*Journal, error) {
	priv, err := LoadOrCreateKey(opts.KeyFile(path))
	if err != nil {
		return nil, fmt.Errorf("open journal %s: %w", path, err)
	}
	if strings.ContainsRune(path, '?') {
		return nil, fmt.Errorf("open journal %s: a '?' in the path is not supported", path)
	}
	base, err := sqlite.NewConnector(dsn(path, true))
	if err != nil {
		return nil, fmt.Errorf("open journal %s: %w", path, err)
	}
	db := sql.OpenDB(appendConnector{base})
	db.SetMaxOpenConns(1)
	j := &Journal{path: path, db: db, priv: priv, pub: priv.Public().(ed25519.PublicKey), clk: opts.Clock, soft: opts.SoftwareVersion, heads: map[string]headState{}}
	j.signer = newSigner(priv)
	j.pubHex = hex.EncodeToString(j.pub)
	if j.clk == nil {
		j.clk = clock.NewReal()
	}
	if opts.BootID != nil {
		j.boot = opts.BootID()
	} else {
		j.boot = ReadBootID()
	}
	if err := j.init(); err != nil {
		db.Close()
		j.signer.Close()
		return nil, fmt.Errorf("open journal %s: %w", path, err)
	}
	for _, p := range []struct {
		st **sql.Stmt
		q  string
	}{
		{&j.head, `SELECT seq, hash, ended FROM heads WHERE session = ?`},
		{&j.put, `INSERT INTO temp.append_record VALUES (?,?,?,?,?,?,?,?,?,?,?)`},
	} {
		if *p.st, err = db.Prepare(p.q); err != nil {
			db.Close()
			j.signer.Close()
			return nil, fmt.Errorf("open journal %s: %w", path, err)
		}
	}
	if j.mark, err = j.openMark(); err != nil {
		j.Close()
		return nil, fmt.Errorf("open journal %s: %w", path, err)
	}
	return j, nil
}

// openMark checks the journal against its high-water mark and starts
// keeping the mark. A journal without the marked record (a lost -wal, a
// file cut or replaced), or holding records but no mark, is refused: its
// sessions must not be resumed or appended to, which would fork them from
// what the board had acknowledged and pushed.
func (j *Journal) openMark() (*markWriter, error) {
	ctx := context.Background()
	m, err := ReadMark(j.path, j.pub)
	if err != nil {
		return nil, fmt.Errorf("%w: %w", ErrRolledBack, err)
	}
	if m != nil {
		what, err := checkMark(ctx, j.db, m)
		if err != nil {
			return nil, fmt.Errorf("check the high-water mark: %w", err)
		}
		if what != "" {
			return nil, fmt.Errorf("%w: %s (run kermalux journal verify; to go on, move the journal and its %s file aside and start a new journal)", ErrRolledBack, what, MarkSuffix)
		}
	} else {
		var n int64
		if err := j.db.QueryRowContext(ctx, `SELECT count(*) FROM records`).Scan(&n); err != nil {
			return nil, fmt.Errorf("count records: %w", err)
		}
		if n > 0 {
			return nil, fmt.Errorf("%w: the journal holds %d records but its high-water mark %s is missing (copy it with the journal, or move the journal aside and start a new one)", ErrRolledBack, n, MarkPath(j.path))
		}
	}
	return startMarkWriter(MarkPath(j.path), j.priv, m)
}

func (j *Journal) init() error {
	ctx := context.Background()
	tx, err := j.db.BeginTx(ctx, nil)
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
		if _, err := tx.Exec(`INSERT INTO schema_version VALUES (?, ?, ?)`, SchemaVersion, j.soft, j.clk.Now().UTC().Format(WallFormat)); err != nil {
			return err
		}
	case err != nil:
		return fmt.Errorf("read schema version: %w", err)
	case v != SchemaVersion:
		return fmt.Errorf("schema version %d, this program reads version %d", v, SchemaVersion)
	}
	var key string
	switch err := tx.QueryRow(`SELECT public_key FROM board WHERE id = 1`).Scan(&key); {
	case errors.Is(err, sql.ErrNoRows):
		if _, err := tx.Exec(`INSERT INTO board VALUES (1, ?)`, j.pubHex); err != nil {
			return err
		}
	case err != nil:
		return fmt.Errorf("read board key: %w", err)
	case key != j.pubHex:
		return fmt.Errorf("%w: written with board key %s, the key file holds %s", ErrWrongBoard, abbrevHex(key), abbrevHex(j.pubHex))
	}
	return tx.Commit()
}

// ReadBootID returns Linux's boot id, or "unknown".
func ReadBootID() string {
	b, err := os.ReadFile("/proc/sys/kernel/random/boot_id")
	if err != nil {
		return "unknown"
	}
	return strings.TrimSpace(string(b))
}

// Path is the journal file.
func (j *Journal) Path() string { return j.path }

// PublicKey is the board's public key.
func (j *Journal) PublicKey() ed25519.PublicKey { return j.pub }

// BoardKey is the board's public key in hex, as enrolled at the workstation.
func (j *Journal) BoardKey() string { return j.pubHex }

// Sign signs msg with the board key (used for batches and bundles).
func (j *Journal) Sign(msg []byte) []byte { return ed25519.Sign(j.priv, msg) }

// Close writes the high-water mark of the last commit and closes the
// journal. A second Close returns the first one's result.
func (j *Journal) Close() error {
	j.closeOnce.Do(func() { j.closeErr = j.close() })
	return j.closeErr
}

func (j *Journal) close() error {
	j.signer.Close()
	var merr error
	if j.mark != nil {
		merr = j.mark.close()
	}
	for _, st := range []*sql.Stmt{j.head, j.put} {
		if st != nil {
			st.Close()
		}
	}
	return errors.Join(j.db.Close(), merr)
}

// NewSessionID returns a fresh session id: UTC start time, the first 8 hex
// digits of the board key and 8 random hex digits.
func NewSessionID(start time.Time, boardKey string) string {
	var r [4]byte
	rand.Read(r[:])
	k := boardKey
	if len(k) > 8 {
		k = k[:8]
	}
	return start.UTC().Format("20060102T150405Z") + "-" + k + "-" + hex.EncodeToString(r[:])
}

// Begin records a new session and returns its id. It fills in s.ID (if
// empty), s.BoardKey, s.Started (if zero) and s.SoftwareVersion (if empty).
func (j *Journal) Begin(ctx context.Context, s entry.Session) (string, error) {
	if s.Started.IsZero() {
		s.Started = j.clk.Now()
	}
	if s.BoardKey != "" && s.BoardKey != j.pubHex {
		return "", fmt.Errorf("begin session: %w: session names board key %s, journal key is %s", ErrWrongBoard, abbrevHex(s.BoardKey), abbrevHex(j.pubHex))
	}
	s.BoardKey = j.pubHex
	if s.SoftwareVersion == "" {
		s.SoftwareVersion = j.soft
	}
	if s.ID == "" {
		s.ID = NewSessionID(s.Started, j.pubHex)
	}
	if s.PrevSession == "" {
		prev, err := j.lastBegun(ctx)
		if err != nil {
			return "", fmt.Errorf("begin session: %w", err)
		}
		s.PrevSession, s.PrevSerial, s.PrevHead = prev.ID, prev.Session.IntensifierSerial, prev.Head
	}
	if _, err := j.append(ctx, s.ID, entry.KindSession, s, true); err != nil {
		return "", err
	}
	return s.ID, nil
}

// Append records payload (an entry type, or canonical-able JSON bytes) as
// the next record of session and returns its sequence number. The record
// is committed (fsynced) when Append returns without error. Kind session
// is written by Begin; nothing may follow a session_end.
func (j *Journal) Append(ctx context.Context, session string, kind entry.Kind, payload any) (int64, error) {
	if kind == entry.KindSession {
		return 0, fmt.Errorf("append to session %s: a session record is written by Begin", session)
	}
	return j.append(ctx, session, kind, payload, false)
}

func marshalPayload(payload any) ([]byte, error) {
	switch p := payload.(type) {
	case json.RawMessage:
		return CanonicalPayload(p)
	case []byte:
		return CanonicalPayload(p)
	}
	return json.Marshal(payload)
}

// Item is one record for AppendAll (the engine's entry.Item).
type Item = entry.Item

// AppendAll records items as the next records of session in one
// transaction (one fsync): all are durable when it returns, or none is
// recorded. It suits bursts of readings and bulk loads; the head is
// signed once, at the last record (the heads row the earlier records'
// inserts leave is replaced within the transaction, so never committed).
func (j *Journal) AppendAll(ctx context.Context, session string, items []Item) (last int64, err error) {
	for _, it := range items {
		if it.Kind == entry.KindSession {
			return 0, fmt.Errorf("append to session %s: a session record is written by Begin", session)
		}
	}
	return j.appendItems(ctx, session, items, false)
}

func (j *Journal) append(ctx context.Context, session string, kind entry.Kind, payload any, first bool) (int64, error) {
	return j.appendItems(ctx, session, []Item{{Kind: kind, Payload: payload}}, first)
}

func (j *Journal) appendItems(ctx context.Context, session string, items []Item, first bool) (int64, error) {
	if len(items) == 0 {
		return 0, fmt.Errorf("append to session %s: no records", session)
	}
	kind := items[0].Kind
	fail := func(err error) (int64, error) {
		if len(items) > 1 {
			return 0, fmt.Errorf("append %d records to session %s: %w", len(items), session, err)
		}
		return 0, fmt.Errorf("append %s to session %s: %w", kind, session, err)
	}
	bodies := make([][]byte, len(items))
	for i, it := range items {
		if it.Kind == "" {
			return fail(errors.New("empty kind"))
		}
		if it.Kind == entry.KindSessionEnd && i != len(items)-1 {
			return fail(errors.New("records after the session_end"))
		}
		body, err := marshalPayload(it.Payload)
		if err != nil {
			return fail(fmt.Errorf("encode %s payload: %w", it.Kind, err))
		}
		bodies[i] = body
	}
	j.mu.Lock()
	defer j.mu.Unlock()
	committed := false
	defer func() {
		if !committed {
			delete(j.heads, session)
		}
	}()
	// One record is one statement in autocommit mode (appendSQL); a burst
	// is one transaction of them.
	head, put := j.head, j.put
	var tx *sql.Tx
	if len(items) > 1 {
		var err error
		if tx, err = j.db.BeginTx(ctx, nil); err != nil {
			return fail(err)
		}
		defer tx.Rollback()
		head, put = tx.StmtContext(ctx, j.head), tx.StmtContext(ctx, j.put)
	}
	var (
		seq   int64
		prev  string
		ended bool
		err   error
	)
	if h, ok := j.heads[session]; ok {
		seq, prev, ended = h.seq, h.hash, h.ended
	} else {
		err = head.QueryRowContext(ctx, session).Scan(&seq, &prev, &ended)
	}
	switch {
	case first && err == nil:
		return fail(errors.New("session id already used"))
	case first && errors.Is(err, sql.ErrNoRows):
		seq, prev = 0, zeroHashHex()
	case errors.Is(err, sql.ErrNoRows):
		return fail(ErrUnknownSession)
	case err != nil:
		return fail(err)
	case ended:
		return fail(ErrSessionEnded)
	}
	// Hash the records first, then sign each and the head (two
	// signatures per append: the record's proves it on its own, the
	// head's that nothing was cut from the session's end); the last
	// record's statement carries the head's. The signer's nonces are made
	// ahead of time, so a signature costs a few microseconds (sign.go).
	recs := make([]Record, len(items))
	hashes := make([][HashSize]byte, len(items))
	for i, it := range items {
		recs[i] = Record{Seq: seq + 1, Session: session, Kind: it.Kind, Wall: j.clk.Now().UTC().Format(WallFormat),
			Mono: int64(j.clk.Mono()), BootID: j.boot, Payload: bodies[i], Prev: prev}
		hashes[i] = recs[i].ComputeHash()
		recs[i].Hash = hex.EncodeToString(hashes[i][:])
		seq, prev = recs[i].Seq, recs[i].Hash
	}
	last := hashes[len(hashes)-1]
	headSigned := hex.EncodeToString(j.signer.Sign(headMessage(session, seq, last[:])))
	for i := range recs {
		r := &recs[i]
		r.Sig = hex.EncodeToString(j.signer.Sign(recordMessage(hashes[i][:])))
		headSig := "" // replaced by the last record's within the transaction
		if i == len(recs)-1 {
			headSig = headSigned
		}
		if _, err := put.ExecContext(ctx, r.Session, r.Seq, string(r.Kind), r.Wall, r.Mono, r.BootID, string(r.Payload), r.Prev, r.Hash, r.Sig, headSig); err != nil {
			return fail(err)
		}
	}
	if tx != nil {
		if err := tx.Commit(); err != nil {
			return fail(err)
		}
	}
	committed = true
	isEnd := items[len(items)-1].Kind == entry.KindSessionEnd
	j.heads[session] = headState{seq: seq, hash: prev, ended: isEnd}
	j.mark.note(session, seq, prev)
	return seq, nil
}

// Records returns up to limit records of session with seq > after, in
// order (limit <= 0: all).
func (j *Journal) Records(ctx context.Context, session string, after int64, limit int) ([]Record, error) {
	return readRecords(ctx, j.db, session, after, limit)
}

type querier interface {
	QueryContext(ctx context.Context, q string, args ...any) (*sql.Rows, error)
}

func readRecords(ctx context.Context, db querier, session string, after int64, limit int) ([]Record, error) {
	if limit <= 0 {
		limit = -1
	}
	rows, err := db.QueryContext(ctx, `SELECT session, seq, kind, wall, mono_ns, boot_id, payload, prev, hash, sig
		FROM records WHERE session = ? AND seq > ? ORDER BY seq LIMIT ?`, session, after, limit)
	if err != nil {
		return nil, fmt.Errorf("read records of session %s: %w", session, err)
	}
	defer rows.Close()
	var out []Record
	for rows.Next() {
		var r Record
		var kind, payload string
		if err := rows.Scan(&r.Session, &r.Seq, &kind, &r.Wall, &r.Mono, &r.BootID, &payload, &r.Prev, &r.Hash, &r.Sig); err != nil {
			return nil, fmt.Errorf("read records of session %s: %w", session, err)
		}
		r.Kind, r.Payload = entry.Kind(kind), json.RawMessage(payload)
		out = append(out, r)
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("read records of session %s: %w", session, err)
	}
	return out, nil
}

// Envelopes returns every record of session, decoded for the report.
func (j *Journal) Envelopes(ctx context.Context, session string) ([]entry.Envelope, error) {
	recs, err := j.Records(ctx, session, 0, 0)
	if err != nil {
		return nil, err
	}
	if len(recs) == 0 {
		return nil, fmt.Errorf("session %s: %w", session, ErrUnknownSession)
	}
	out := make([]entry.Envelope, len(recs))
	for i := range recs {
		if out[i], err = recs[i].Envelope(); err != nil {
			return nil, fmt.Errorf("session %s: %w", session, err)
		}
	}
	return out, nil
}

// SessionSummary describes one session in the journal.
type SessionSummary struct {
	ID      string
	Session entry.Session
	Last    int64             // sequence number of the last record
	Ended   bool              // a session_end was recorded
	End     *entry.SessionEnd // nil unless Ended
}

// begun is the session begun last, with the hash of its last record.
type begun struct {
	ID      string
	Session entry.Session
	Head    string
}

// lastBegun returns the session the journal began last (zero when none),
// for the next session's link to it (entry.Session.PrevSession).
func (j *Journal) lastBegun(ctx context.Context) (begun, error) {
	var b begun
	var first string
	err := j.db.QueryRowContext(ctx, `SELECT h.session, h.hash, r.payload FROM heads h JOIN records r ON r.session = h.session AND r.seq = 1 ORDER BY h.rowid DESC LIMIT 1`).Scan(&b.ID, &b.Head, &first)
	if errors.Is(err, sql.ErrNoRows) {
		return begun{}, nil
	}
	if err != nil {
		return begun{}, fmt.Errorf("the session begun before: %w", err)
	}
	if err := json.Unmarshal([]byte(first), &b.Session); err != nil {
		return begun{}, fmt.Errorf("the session begun before (%s), record 1: %w", b.ID, err)
	}
	return b, nil
}

// Sessions lists the journal's sessions in the order they began.
func (j *Journal) Sessions(ctx context.Context) ([]SessionSummary, error) {
	return listSessions(ctx, j.db, false)
}

// Unfinished lists sessions without a session_end, for resuming after a
// restart or power cut; the engine rebuilds its position from Envelopes.
func (j *Journal) Unfinished(ctx context.Context) ([]SessionSummary, error) {
	return listSessions(ctx, j.db, true)
}

func listSessions(ctx context.Context, db querier, unfinished bool) ([]SessionSummary, error) {
	q := `SELECT h.session, h.seq, h.ended, r.payload,
		(SELECT e.payload FROM records e WHERE e.session = h.session AND e.seq = h.seq AND e.kind = 'session_end')
		FROM heads h JOIN records r ON r.session = h.session AND r.seq = 1`
	if unfinished {
		q += ` WHERE h.ended = 0`
	}
	q += ` ORDER BY h.rowid`
	rows, err := db.QueryContext(ctx, q)
	if err != nil {
		return nil, fmt.Errorf("list sessions: %w", err)
	}
	defer rows.Close()
	var out []SessionSummary
	for rows.Next() {
		var s SessionSummary
		var first string
		var end sql.NullString
		if err := rows.Scan(&s.ID, &s.Last, &s.Ended, &first, &end); err != nil {
			return nil, fmt.Errorf("list sessions: %w", err)
		}
		if err := json.Unmarshal([]byte(first), &s.Session); err != nil {
			return nil, fmt.Errorf("list sessions: session %s record 1: %w", s.ID, err)
		}
		if end.Valid {
			s.End = new(entry.SessionEnd)
			if err := json.Unmarshal([]byte(end.String), s.End); err != nil {
				return nil, fmt.Errorf("list sessions: session %s record %d: %w", s.ID, s.Last, err)
			}
		}
		out = append(out, s)
	}
	return out, rows.Err()
}

// Resumable returns the latest unfinished session of the same procedure
// (name and text hash) on the same intensifier as s, to resume after a
// restart; "" if there is none.
func (j *Journal) Resumable(ctx context.Context, s entry.Session) (string, error) {
	ss, err := j.Unfinished(ctx)
	if err != nil {
		return "", err
	}
	id := ""
	for _, u := range ss {
		if u.Session.Procedure == s.Procedure && u.Session.IntensifierSerial == s.IntensifierSerial && u.Session.ProcedureHash == s.ProcedureHash {
			id = u.ID // the latest one
		}
	}
	return id, nil
}
