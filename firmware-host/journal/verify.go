package journal

import (
	"bytes"
	"context"
	"crypto/ed25519"
	"database/sql"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"strings"

	"kermalux/procedures/entry"
)

// Problem is one thing wrong in a journal, batch or bundle.
type Problem struct {
	Session string     `json:"session,omitempty"`
	Seq     int64      `json:"seq,omitempty"` // 0: not about one record
	Kind    entry.Kind `json:"kind,omitempty"`
	What    string     `json:"what"`
	Hint    string     `json:"hint,omitempty"`
}

func (p Problem) String() string {
	var b strings.Builder
	if p.Session != "" {
		fmt.Fprintf(&b, "session %s ", p.Session)
	}
	if p.Seq > 0 {
		fmt.Fprintf(&b, "record %d ", p.Seq)
		if p.Kind != "" {
			fmt.Fprintf(&b, "(%s) ", p.Kind)
		}
	}
	if b.Len() > 0 {
		s := strings.TrimSpace(b.String())
		b.Reset()
		b.WriteString(s + ": ")
	}
	b.WriteString(p.What)
	if p.Hint != "" {
		b.WriteString("\n  hint: " + p.Hint)
	}
	return b.String()
}

// VerifyReport is what Verify found.
type VerifyReport struct {
	Path       string    `json:"path"`
	Schema     int       `json:"schema"`
	BoardKey   string    `json:"board_key"`
	Sessions   int       `json:"sessions"`
	Records    int64     `json:"records"`
	EnrolledAs string    `json:"enrolled_as,omitempty"` // the store's name of the board key, when a store was given
	Unfinished []string  `json:"unfinished,omitempty"`  // sessions without session_end
	Problems   []Problem `json:"problems,omitempty"`    // the first problem of each bad session, and file-level problems
}

// OK reports whether nothing is wrong.
func (r VerifyReport) OK() bool { return len(r.Problems) == 0 }

const (
	hintEdited   = "the record was changed after it was written; use an untouched copy of the journal (the board's own file, or the workstation store)"
	hintMissing  = "records were deleted; use an untouched copy of the journal"
	hintKey      = "the record was not signed by this board's key; check the journal comes from the board named, or that its key was not replaced"
	hintCorrupt  = "the file is damaged (disk or copy error); copy it again from the board, and keep the -wal file beside it"
	hintNotJourn = "give the path of a kermalux journal (the board's journal.db)"
)

func openRead(path string) (*sql.DB, error) {
	if _, err := os.Stat(path); err != nil {
		return nil, fmt.Errorf("journal %s: %w", path, err)
	}
	db, err := sql.Open("sqlite", dsn(path, false))
	if err != nil {
		return nil, fmt.Errorf("journal %s: %w", path, err)
	}
	db.SetMaxOpenConns(1)
	return db, nil
}

// Verify checks the journal at path: schema version, the hash chain and
// every signature against the board key recorded in the file. A Report
// with problems means the journal is bad; an error means it could not be
// read at all.
func Verify(ctx context.Context, path string) (VerifyReport, error) {
	return VerifyWith(ctx, path, VerifyOptions{})
}

// VerifyOptions add outside references to what Verify compares the
// journal with.
type VerifyOptions struct {
	// Key, when set, is the key the journal must be signed with.
	Key ed25519.PublicKey
	// Enrolled, when set, looks up a board key (hex) among the boards a
	// workstation store has enrolled: its name, or ok false.
	Enrolled func(ctx context.Context, key string) (name string, ok bool, err error)
	// StoreHead, when set, gives the last record of session a workstation
	// store holds (seq 0: none) and that record's hash. A store holding
	// more of a session than the journal, or other records, shows the
	// journal rolled back or rewritten after the push.
	StoreHead func(ctx context.Context, session string) (seq int64, hash string, err error)
}

// VerifyWith checks the journal at path as Verify does, then against its
// high-water mark file and, as opts give them, a required key, a store's
// enrolled boards and a store's records. It opens the file read-only:
// it never checkpoints, never deletes the -wal file, never writes.
// SQLite's own integrity check runs first; a damaged file is reported as
// such, before anything read through its damaged indexes.
func VerifyWith(ctx context.Context, path string, opts VerifyOptions) (VerifyReport, error) {
	rep := VerifyReport{Path: path}
	db, err := openRead(path)
	if err != nil {
		return rep, err
	}
	defer db.Close()
	if err := db.PingContext(ctx); err == nil {
		var n int
		if err := db.QueryRowContext(ctx, `SELECT count(*) FROM sqlite_master`).Scan(&n); needsRecovery(err) {
			// A hot rollback journal or a WAL index to rebuild (a cut
			// first start): reading it needs a write, so read a copy.
			db.Close()
			return verifyCopy(ctx, path, opts)
		}
	}
	fileProblem := func(what, hint string) (VerifyReport, error) {
		rep.Problems = append(rep.Problems, Problem{What: what, Hint: hint})
		return rep, nil
	}
	// A file created by a first start that was cut before the schema was
	// committed is an empty journal: nothing was ever acknowledged in it,
	// unless its high-water mark says otherwise (a file cut to nothing).
	var tables int
	if err := db.QueryRowContext(ctx, `SELECT count(*) FROM sqlite_master`).Scan(&tables); err == nil && tables == 0 {
		if m := unverifiedMark(path, opts.Key); m != nil && m.Seq > 0 {
			return fileProblem(fmt.Sprintf("%s: the journal is empty, but its high-water mark names record %d of session %s: the board's records are gone", ErrRolledBack, m.Seq, m.Session), hintRolledBack)
		}
		return rep, nil
	}
	if bad, err := integrity(ctx, db); needsRecovery(err) {
		db.Close()
		return verifyCopy(ctx, path, opts)
	} else if err != nil {
		return fileProblem(fmt.Sprintf("not a journal (SQLite cannot read it): %v", err), hintNotJourn)
	} else if bad != "" {
		return fileProblem("the SQLite integrity check failed, so no record read from the file can be trusted: "+bad, hintCorrupt)
	}
	if err := db.QueryRowContext(ctx, `SELECT version FROM schema_version`).Scan(&rep.Schema); err != nil {
		if strings.Contains(err.Error(), "no such table") || strings.Contains(err.Error(), "not a database") {
			return fileProblem(fmt.Sprintf("not a journal: %v", err), hintNotJourn)
		}
		return fileProblem(fmt.Sprintf("cannot read schema version: %v", err), hintCorrupt)
	}
	if rep.Schema != SchemaVersion {
		return fileProblem(fmt.Sprintf("schema version %d; this program reads version %d", rep.Schema, SchemaVersion), "use the kermalux release that wrote this journal")
	}
	if err := db.QueryRowContext(ctx, `SELECT public_key FROM board WHERE id = 1`).Scan(&rep.BoardKey); err != nil {
		return fileProblem(fmt.Sprintf("cannot read board key: %v", err), hintCorrupt)
	}
	fileKey, err := ParsePublicKey(rep.BoardKey)
	if err != nil {
		return fileProblem(err.Error(), hintCorrupt)
	}
	if pub := opts.Key; pub != nil && !pub.Equal(fileKey) {
		return fileProblem(fmt.Sprintf("journal is signed by board key %s, expected %s", rep.BoardKey, hex.EncodeToString(pub)), hintKey)
	}
	if opts.Enrolled != nil {
		name, ok, err := opts.Enrolled(ctx, rep.BoardKey)
		switch {
		case err != nil:
			return rep, fmt.Errorf("journal %s: enrolled boards: %w", path, err)
		case !ok:
			rep.Problems = append(rep.Problems, Problem{What: fmt.Sprintf("journal is signed by board key %s, which the store has not enrolled: it was not written (or was re-signed) by a known board", rep.BoardKey), Hint: hintKey})
		default:
			rep.EnrolledAs = name
		}
	}
	heads := map[string]headRow{}
	var order []string
	rows, err := db.QueryContext(ctx, `SELECT session, seq, hash, head_sig, ended FROM heads ORDER BY rowid`)
	if err != nil {
		return fileProblem(fmt.Sprintf("cannot read session heads: %v", err), hintCorrupt)
	}
	for rows.Next() {
		var h headRow
		if err := rows.Scan(&h.session, &h.seq, &h.hash, &h.sig, &h.ended); err != nil {
			rows.Close()
			return fileProblem(fmt.Sprintf("cannot read session heads: %v", err), hintCorrupt)
		}
		heads[h.session] = h
		order = append(order, h.session)
	}
	rows.Close()
	if err := rows.Err(); err != nil {
		return fileProblem(fmt.Sprintf("cannot read session heads: %v", err), hintCorrupt)
	}
	// Sessions that have records but no head row.
	srows, err := db.QueryContext(ctx, `SELECT DISTINCT session FROM records`)
	if err != nil {
		return fileProblem(fmt.Sprintf("cannot read records: %v", err), hintCorrupt)
	}
	for srows.Next() {
		var s string
		if err := srows.Scan(&s); err == nil {
			if _, ok := heads[s]; !ok {
				rep.Problems = append(rep.Problems, Problem{Session: s, What: "records without a session head (the head row was deleted)", Hint: hintMissing})
			}
		}
	}
	srows.Close()
	// The session each verified session names as begun before it
	// (entry.Session.PrevSession), to find one deleted whole.
	before := map[string]string{}
	for _, s := range order {
		rep.Sessions++
		h := heads[s]
		recs, err := readRecords(ctx, db, s, 0, 0)
		if err != nil {
			rep.Problems = append(rep.Problems, Problem{Session: s, What: err.Error(), Hint: hintCorrupt})
			continue
		}
		rep.Records += int64(len(recs))
		if !h.ended {
			rep.Unfinished = append(rep.Unfinished, s)
		}
		if p := CheckSession(fileKey, recs); p != nil {
			rep.Problems = append(rep.Problems, *p)
			continue
		}
		if p := h.check(fileKey, recs); p != nil {
			rep.Problems = append(rep.Problems, *p)
			continue
		}
		var first entry.Session
		if recs[0].Kind == entry.KindSession && json.Unmarshal(recs[0].Payload, &first) == nil && first.PrevSession != "" {
			before[s] = first.PrevSession
		}
		if opts.StoreHead != nil {
			p, err := compareStore(ctx, opts.StoreHead, s, recs)
			if err != nil {
				return rep, fmt.Errorf("journal %s: %w", path, err)
			}
			if p != nil {
				rep.Problems = append(rep.Problems, *p)
			}
		}
	}
	for _, s := range order {
		if p, ok := before[s]; ok {
			if _, held := heads[p]; !held {
				rep.Problems = append(rep.Problems, Problem{Session: s, Seq: 1, Kind: entry.KindSession, What: fmt.Sprintf("its signed session record names session %s as the one the board began before it, which the journal does not hold (deleted whole)", p), Hint: hintMissing})
			}
		}
	}
	rep.Problems = append(rep.Problems, markProblems(ctx, db, path, fileKey, rep.Records)...)
	return rep, nil
}

// needsRecovery reports SQLite's "read-only and must recover first"
// errors (SQLITE_READONLY_RECOVERY 264, SQLITE_READONLY_ROLLBACK 776).
func needsRecovery(err error) bool {
	var c interface{ Code() int }
	if errors.As(err, &c) {
		return c.Code() == 264 || c.Code() == 776
	}
	return err != nil && (strings.HasSuffix(err.Error(), "(776)") || strings.HasSuffix(err.Error(), "(264)"))
}

// verifyCopy verifies a copy of the journal's files (journal, -wal,
// -journal, mark) in a temporary folder, so that SQLite may recover the
// copy while the original stays untouched.
func verifyCopy(ctx context.Context, path string, opts VerifyOptions) (VerifyReport, error) {
	dir, err := os.MkdirTemp("", "kermalux-verify-")
	if err != nil {
		return VerifyReport{Path: path}, fmt.Errorf("journal %s: %w", path, err)
	}
	defer os.RemoveAll(dir)
	cp := filepath.Join(dir, "journal.db")
	for _, suf := range []string{"", "-wal", "-journal", MarkSuffix} {
		data, err := os.ReadFile(path + suf)
		if errors.Is(err, fs.ErrNotExist) {
			continue
		}
		if err == nil {
			err = os.WriteFile(cp+suf, data, 0o600)
		}
		if err != nil {
			return VerifyReport{Path: path}, fmt.Errorf("journal %s: copy for verification: %w", path, err)
		}
	}
	db, err := sql.Open("sqlite", dsn(cp, true))
	if err != nil {
		return VerifyReport{Path: path}, fmt.Errorf("journal %s: %w", path, err)
	}
	var n int
	err = db.QueryRowContext(ctx, `SELECT count(*) FROM sqlite_master`).Scan(&n) // recovers the copy
	db.Close()
	if err != nil && !strings.Contains(err.Error(), "not a database") {
		return VerifyReport{Path: path}, fmt.Errorf("journal %s: recover a copy: %w", path, err)
	}
	rep, err := VerifyWith(ctx, cp, opts)
	rep.Path = path
	return rep, err
}

const hintRolledBack = "the journal lost records the board had committed (a deleted, cut or damaged journal.db-wal, or a journal file replaced by an older copy); keep this file, find the board's untouched copy or the workstation store's records, and tell your physicist"

// markProblems compares the journal with its high-water mark.
func markProblems(ctx context.Context, db *sql.DB, path string, key ed25519.PublicKey, records int64) []Problem {
	m, err := ReadMark(path, key)
	switch {
	case err != nil:
		return []Problem{{What: fmt.Sprintf("%v: the high-water mark cannot vouch for the journal", err), Hint: "the mark was damaged or replaced; copy journal.db.mark from the board with the journal"}}
	case m == nil && records > 0:
		return []Problem{{What: fmt.Sprintf("no high-water mark (%s) beside a journal of %d records: a rollback of its last records cannot be ruled out", MarkPath(path), records), Hint: "copy journal.db.mark from the board with the journal; a board never runs without it"}}
	case m == nil:
		return nil
	}
	what, err := checkMark(ctx, db, m)
	if err != nil {
		return []Problem{{What: fmt.Sprintf("cannot check the high-water mark: %v", err), Hint: hintCorrupt}}
	}
	if what != "" {
		return []Problem{{Session: m.Session, Seq: m.Seq, What: ErrRolledBack.Error() + ": " + what, Hint: hintRolledBack}}
	}
	return nil
}

// unverifiedMark reads the mark of a journal whose key is not known (an
// empty file): with key nil its signature is not checked, which is enough
// to refuse calling the journal good, never to call it good.
func unverifiedMark(path string, key ed25519.PublicKey) *Mark {
	if key != nil {
		m, _ := ReadMark(path, key)
		return m
	}
	data, err := os.ReadFile(MarkPath(path))
	if err != nil || len(data) > 2*markSlot {
		return nil
	}
	var best *Mark
	for off := 0; off < len(data); off += markSlot {
		var m markJSON
		if json.Unmarshal(bytes.Trim(data[off:min(off+markSlot, len(data))], " \n\x00"), &m) == nil && (best == nil || m.N > best.N) {
			best = &m.Mark
		}
	}
	return best
}

// integrity runs SQLite's integrity check; it returns "" when the file is
// sound, else the first lines of what SQLite found (an index page that
// does not match its table, a page used twice...).
func integrity(ctx context.Context, db *sql.DB) (string, error) {
	rows, err := db.QueryContext(ctx, `PRAGMA integrity_check(5)`)
	if err != nil {
		return "", err
	}
	defer rows.Close()
	var lines []string
	for rows.Next() {
		var l string
		if err := rows.Scan(&l); err != nil {
			return "", err
		}
		lines = append(lines, l)
	}
	if err := rows.Err(); err != nil {
		return "", err
	}
	if len(lines) == 1 && lines[0] == "ok" {
		return "", nil
	}
	return strings.Join(lines, "; "), nil
}

// compareStore checks a verified session against what a store holds of it.
func compareStore(ctx context.Context, head func(context.Context, string) (int64, string, error), session string, recs []Record) (*Problem, error) {
	seq, hash, err := head(ctx, session)
	if err != nil || seq == 0 {
		return nil, err
	}
	last := recs[len(recs)-1]
	switch {
	case seq > last.Seq:
		return &Problem{Session: session, Seq: last.Seq, Kind: last.Kind, What: fmt.Sprintf("%s: the store holds this session up to record %d, the journal only up to record %d", ErrRolledBack, seq, last.Seq), Hint: hintRolledBack}, nil
	case recs[seq-1].Hash != hash:
		return &Problem{Session: session, Seq: seq, Kind: recs[seq-1].Kind, What: fmt.Sprintf("record %d hashes to %s in the journal but %s in the store: the journal and the store hold different sessions under one id (a fork)", seq, abbrevHex(recs[seq-1].Hash), abbrevHex(hash)), Hint: hintEdited}, nil
	}
	return nil, nil
}

type headRow struct {
	session, hash, sig string
	seq                int64
	ended              bool
}

func (h headRow) check(pub ed25519.PublicKey, recs []Record) *Problem {
	last := recs[len(recs)-1]
	p := &Problem{Session: h.session, Seq: last.Seq, Kind: last.Kind}
	hash, err := hex.DecodeString(h.hash)
	sig, err2 := hex.DecodeString(h.sig)
	switch {
	case h.seq != last.Seq || h.hash != last.Hash:
		p.What = fmt.Sprintf("the signed head names record %d (%s) but the last record is %d (%s)", h.seq, abbrevHex(h.hash), last.Seq, abbrevHex(last.Hash))
		p.Hint = hintMissing
		if h.seq < last.Seq {
			p.Hint = hintEdited
		}
	case err != nil || err2 != nil || !ed25519.Verify(pub, headMessage(h.session, h.seq, hash), sig):
		p.What = "the head signature does not verify"
		p.Hint = hintKey
	case h.ended != (last.Kind == entry.KindSessionEnd):
		p.What = fmt.Sprintf("head says ended=%v but the last record is %s", h.ended, last.Kind)
		p.Hint = hintEdited
	default:
		return nil
	}
	return p
}

// CheckSession checks a whole session's records (from seq 1): chain,
// hashes, signatures, that record 1 is the session record naming this
// session and board key, and that nothing follows a session_end. It
// returns the first problem, or nil.
func CheckSession(pub ed25519.PublicKey, recs []Record) *Problem {
	if len(recs) == 0 {
		return &Problem{What: "session has no records", Hint: hintMissing}
	}
	s := recs[0].Session
	if i, err := CheckChain(pub, 0, zeroHashHex(), recs); err != nil {
		return recordProblem(s, recs[i], err)
	}
	return checkSessionShape(pub, recs, 0)
}

// checkSessionShape checks recs (seq base+1...) for the session rules.
func checkSessionShape(pub ed25519.PublicKey, recs []Record, base int64) *Problem {
	for i := range recs {
		r := &recs[i]
		if r.Seq == 1 {
			if r.Kind != entry.KindSession {
				return &Problem{Session: r.Session, Seq: 1, Kind: r.Kind, What: "record 1 must be the session record", Hint: hintEdited}
			}
			var s entry.Session
			if err := json.Unmarshal(r.Payload, &s); err != nil {
				return &Problem{Session: r.Session, Seq: 1, Kind: r.Kind, What: err.Error(), Hint: hintEdited}
			}
			if s.ID != r.Session {
				return &Problem{Session: r.Session, Seq: 1, Kind: r.Kind, What: fmt.Sprintf("session record names id %q", s.ID), Hint: hintEdited}
			}
			if s.BoardKey != hex.EncodeToString(pub) {
				return &Problem{Session: r.Session, Seq: 1, Kind: r.Kind, What: fmt.Sprintf("session record names board key %s, signed by %s", abbrevHex(s.BoardKey), abbrevHex(hex.EncodeToString(pub))), Hint: hintKey}
			}
		} else if r.Kind == entry.KindSession {
			return &Problem{Session: r.Session, Seq: r.Seq, Kind: r.Kind, What: "a second session record inside the session", Hint: hintEdited}
		}
		if i > 0 && recs[i-1].Kind == entry.KindSessionEnd {
			return &Problem{Session: r.Session, Seq: r.Seq, Kind: r.Kind, What: "record after the session_end", Hint: hintEdited}
		}
	}
	return nil
}

func recordProblem(session string, r Record, err error) *Problem {
	p := &Problem{Session: session, Seq: r.Seq, Kind: r.Kind, What: err.Error(), Hint: hintEdited}
	switch {
	case errors.Is(err, ErrBadSignature):
		p.Hint = hintKey
	case errors.Is(err, ErrChainBroken) && strings.Contains(err.Error(), "missing"):
		p.Hint = hintMissing
	}
	return p
}

// Export calls fn with every record of the journal at path, session by
// session in the order they began, without checking them (see Verify).
func Export(ctx context.Context, path string, fn func(Record) error) error {
	db, err := openRead(path)
	if err != nil {
		return err
	}
	defer db.Close()
	sessions, err := listSessions(ctx, db, false)
	if err != nil {
		return fmt.Errorf("journal %s: %w", path, err)
	}
	for _, s := range sessions {
		recs, err := readRecords(ctx, db, s.ID, 0, 0)
		if err != nil {
			return fmt.Errorf("journal %s: %w", path, err)
		}
		for _, r := range recs {
			if err := fn(r); err != nil {
				return err
			}
		}
	}
	return nil
}

// ListSessions lists the sessions of the journal at path without a key.
func ListSessions(ctx context.Context, path string) ([]SessionSummary, error) {
	db, err := openRead(path)
	if err != nil {
		return nil, err
	}
	defer db.Close()
	out, err := listSessions(ctx, db, false)
	if err != nil {
		return nil, fmt.Errorf("journal %s: %w", path, err)
	}
	return out, nil
}

// ErrNotVerified is wrapped by the error of a session that does not verify
// (VerifySession): a reader must not trust its records.
var ErrNotVerified = errors.New("journal does not verify")

// VerifyError is a session (or file) that does not verify: the first
// problem found, naming the record.
type VerifyError struct {
	Path    string
	Problem Problem
}

func (e *VerifyError) Error() string {
	return fmt.Sprintf("journal %s does not verify: %s", e.Path, e.Problem.String())
}

// Unwrap lets errors.Is(err, ErrNotVerified) find it.
func (e *VerifyError) Unwrap() error { return ErrNotVerified }

// VerifySession checks one session of this journal the way Verify checks
// the file: every record's hash, signature (with this board's key) and
// chain link, the session's shape, and its signed head. It is what a
// resume runs before trusting anything the session recorded. The error
// is a *VerifyError naming the first bad record.
func (j *Journal) VerifySession(ctx context.Context, session string) error {
	recs, err := readRecords(ctx, j.db, session, 0, 0)
	if err != nil {
		return fmt.Errorf("verify session %s: %w", session, err)
	}
	if len(recs) == 0 {
		return &VerifyError{Path: j.path, Problem: Problem{Session: session, What: "no records of this session", Hint: hintMissing}}
	}
	if p := CheckSession(j.pub, recs); p != nil {
		return &VerifyError{Path: j.path, Problem: *p}
	}
	h := headRow{session: session}
	err = j.db.QueryRowContext(ctx, `SELECT seq, hash, head_sig, ended FROM heads WHERE session = ?`, session).Scan(&h.seq, &h.hash, &h.sig, &h.ended)
	if errors.Is(err, sql.ErrNoRows) {
		last := recs[len(recs)-1]
		return &VerifyError{Path: j.path, Problem: Problem{Session: session, Seq: last.Seq, Kind: last.Kind, What: "the last record has no signed session head (the head row was deleted)", Hint: hintMissing}}
	}
	if err != nil {
		return fmt.Errorf("verify session %s: read head: %w", session, err)
	}
	if p := h.check(j.pub, recs); p != nil {
		return &VerifyError{Path: j.path, Problem: *p}
	}
	return nil
}

// FileKey returns the board key (hex) recorded in the journal at path,
// read-only; "" for a journal with no schema yet.
func FileKey(ctx context.Context, path string) (string, error) {
	db, err := openRead(path)
	if err != nil {
		return "", err
	}
	defer db.Close()
	var tables int
	if err := db.QueryRowContext(ctx, `SELECT count(*) FROM sqlite_master WHERE name = 'board'`).Scan(&tables); err != nil {
		return "", fmt.Errorf("journal %s: %w", path, err)
	}
	if tables == 0 {
		return "", nil
	}
	var key string
	if err := db.QueryRowContext(ctx, `SELECT public_key FROM board WHERE id = 1`).Scan(&key); err != nil && !errors.Is(err, sql.ErrNoRows) {
		return "", fmt.Errorf("journal %s: board key: %w", path, err)
	}
	return key, nil
}

// CheckHashChain checks a whole session's records (from seq 1) for their
// hashes and links alone, for records whose signatures are not kept (a
// store proves them by signed heads): it returns the first problem, or
// nil. The caller must check the head that vouches for the last hash.
func CheckHashChain(recs []Record) *Problem {
	if len(recs) == 0 {
		return &Problem{What: "session has no records", Hint: hintMissing}
	}
	if i, err := checkChain(nil, 0, zeroHashHex(), recs, false); err != nil {
		return recordProblem(recs[0].Session, recs[i], err)
	}
	return nil
}
