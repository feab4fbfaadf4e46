package journal

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

// Report is what Verify found.
type Report struct {
	Path       string    `json:"path"`
	Schema     int       `json:"schema"`
	BoardKey   string    `json:"board_key"`
	Sessions   int       `json:"sessions"`
	Records    int64     `json:"records"`
	Unfinished []string  `json:"unfinished,omitempty"` // sessions without session_end
	Problems   []Problem `json:"problems,omitempty"`   // the first problem of each bad session, and file-level problems
}

// OK reports whether nothing is wrong.
func (r Report) OK() bool { return len(r.Problems) == 0 }

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
func Verify(ctx context.Context, path string) (Report, error) { return VerifyKey(ctx, path, nil) }

// VerifyKey is Verify, additionally requiring the journal to be signed by
// pub (when not nil), e.g. the key enrolled for the board.
func VerifyKey(ctx context.Context, path string, pub ed25519.PublicKey) (Report, error) {
	rep := Report{Path: path}
	db, err := openRead(path)
	if err != nil {
		return rep, err
	}
	defer db.Close()
	fileProblem := func(what, hint string) (Report, error) {
		rep.Problems = append(rep.Problems, Problem{What: what, Hint: hint})
		return rep, nil
	}
	// A file created by a first start that was cut before the schema was
	// committed is an empty journal: nothing was ever acknowledged in it.
	var tables int
	if err := db.QueryRowContext(ctx, `SELECT count(*) FROM sqlite_master`).Scan(&tables); err == nil && tables == 0 {
		return rep, nil
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
	if pub != nil && !pub.Equal(fileKey) {
		return fileProblem(fmt.Sprintf("journal names board key %s, expected %s", short(rep.BoardKey), short(hex.EncodeToString(pub))), hintKey)
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
		}
	}
	return rep, nil
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
		p.What = fmt.Sprintf("the signed head names record %d (%s) but the last record is %d (%s)", h.seq, short(h.hash), last.Seq, short(last.Hash))
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
				return &Problem{Session: r.Session, Seq: 1, Kind: r.Kind, What: fmt.Sprintf("session record names board key %s, signed by %s", short(s.BoardKey), short(hex.EncodeToString(pub))), Hint: hintKey}
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
		return &VerifyError{Path: j.path, Problem: Problem{Session: session, What: "records without a session head (the head row was deleted)", Hint: hintMissing}}
	}
	if err != nil {
		return fmt.Errorf("verify session %s: read head: %w", session, err)
	}
	if p := h.check(j.pub, recs); p != nil {
		return &VerifyError{Path: j.path, Problem: *p}
	}
	return nil
}
