package store

import (
	"context"
	"database/sql"
	"encoding/json"
	"errors"
	"fmt"
	"sort"
	"strings"
	"time"

	"kermalux/procedures/entry"
)

// Query selects sessions; empty fields and zero times match everything.
// From is inclusive, To exclusive, compared with the session's start.
type Query struct {
	Site, Room, Serial string
	From, To           time.Time
}

// SessionInfo describes a stored session as its signed records say it:
// the session record (record 1) and, when the session has ended, its
// session_end record (the last). The store's sessions row copies some of
// their fields (site, room, serial, start, the payloads, the mark) to be
// found by; no signature covers the row, so nothing a reader shows is
// taken from it, and what it says otherwise is listed in Changed.
type SessionInfo struct {
	ID        string
	BoardKey  string // the board key the session record names
	BoardName string // that key's enrolment name ("" when not enrolled)
	Session   entry.Session
	End       *entry.SessionEnd // nil while the session has no session_end
	Records   int64             // records stored (the last record's number)
	// Changed lists what the session's row in the store says that its
	// records do not (an SQL edit of the row), each naming the column;
	// empty when they agree. The records themselves are checked by their
	// hashes and signed heads (report.VerifyStoreSession), which also
	// reports these.
	Changed []string
}

// sessionRow is a sessions row with the records it is checked against.
type sessionRow struct {
	id, board, site, room, model, serial, payload, head string
	startedNs, high, ended                              int64
	endPayload                                          sql.NullString
	firstKind, firstPayload                             sql.NullString
	lastKind, lastPayload, lastHash                     sql.NullString
	lastSeq                                             sql.NullInt64
}

// sessionsSQL reads each sessions row with its first record and the
// number of its last (the last record itself is read by lastSQL after the
// rows are closed: a join on a computed number is not planned well).
const sessionsSQL = `SELECT s.id, s.board, s.site, s.room, s.model, s.serial, s.started_ns, s.payload, s.high, s.head, s.ended, s.end_payload,
	f.kind, f.payload, (SELECT max(m.seq) FROM records m WHERE m.session = s.id)
	FROM sessions s
	LEFT JOIN records f ON f.session = s.id AND f.seq = 1`

const lastSQL = `SELECT kind, payload, hash FROM records WHERE session = ? AND seq = ?`

// Sessions returns the sessions matching q, oldest first (by their signed
// start). The rows are found by their indexed copies of the session
// record's fields; each found session is then read from its records and
// what its row says otherwise is in Changed. A row whose copies were
// edited away from q (a serial changed, with its results index, to
// another intensifier's) is not found here, as a session deleted from the
// store is not; it is named where it was moved to (the trend of that
// serial refuses it).
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
	return s.sessions(ctx, where, args)
}

// Session returns the stored session id as Sessions does.
func (s *Store) Session(ctx context.Context, id string) (SessionInfo, error) {
	out, err := s.sessions(ctx, []string{"s.id = ?"}, []any{id})
	if err != nil {
		return SessionInfo{}, err
	}
	if len(out) == 0 {
		return SessionInfo{}, fmt.Errorf("store %s: no session %s", s.name, id)
	}
	return out[0], nil
}

func (s *Store) sessions(ctx context.Context, where []string, args []any) ([]SessionInfo, error) {
	boards, err := s.Boards(ctx)
	if err != nil {
		return nil, err
	}
	names := make(map[string]string, len(boards))
	for _, b := range boards {
		names[b.Key] = b.Name
	}
	sqlq := sessionsSQL
	if len(where) > 0 {
		sqlq += " WHERE " + strings.Join(where, " AND ")
	}
	rows, err := s.db.QueryContext(ctx, s.q(sqlq), args...)
	if err != nil {
		return nil, fmt.Errorf("store %s: sessions: %w", s.name, err)
	}
	var found []sessionRow
	for rows.Next() {
		var r sessionRow
		if err := rows.Scan(&r.id, &r.board, &r.site, &r.room, &r.model, &r.serial, &r.startedNs, &r.payload, &r.high, &r.head, &r.ended, &r.endPayload,
			&r.firstKind, &r.firstPayload, &r.lastSeq); err != nil {
			rows.Close()
			return nil, fmt.Errorf("store %s: sessions: %w", s.name, err)
		}
		found = append(found, r)
	}
	rows.Close()
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("store %s: sessions: %w", s.name, err)
	}
	var last *sql.Stmt
	if len(found) > 0 {
		if last, err = s.db.PrepareContext(ctx, s.q(lastSQL)); err != nil {
			return nil, fmt.Errorf("store %s: sessions: %w", s.name, err)
		}
		defer last.Close()
	}
	out := make([]SessionInfo, 0, len(found))
	for i := range found {
		r := &found[i]
		if r.lastSeq.Valid {
			err := last.QueryRowContext(ctx, r.id, r.lastSeq.Int64).Scan(&r.lastKind, &r.lastPayload, &r.lastHash)
			if err != nil && !errors.Is(err, sql.ErrNoRows) {
				return nil, fmt.Errorf("store %s: session %s record %d: %w", s.name, r.id, r.lastSeq.Int64, err)
			}
		}
		si, err := r.info()
		if err != nil {
			return nil, fmt.Errorf("store %s: %w", s.name, err)
		}
		si.BoardName = names[si.BoardKey]
		out = append(out, si)
	}
	sort.SliceStable(out, func(i, j int) bool {
		a, b := out[i].Session.Started, out[j].Session.Started
		if !a.Equal(b) {
			return a.Before(b)
		}
		return out[i].ID < out[j].ID
	})
	return out, nil
}

// info is the session as its records say it, with what the row says
// otherwise. A session whose record 1 is missing or no session record is
// described by the row (so that it can be listed and named) and says so
// in Changed.
func (r *sessionRow) info() (SessionInfo, error) {
	si := SessionInfo{ID: r.id, Records: r.lastSeq.Int64}
	differ := func(column string, row, rec any) {
		si.Changed = append(si.Changed, fmt.Sprintf("the store's session row says %s %s, its signed records %s (the row was changed)", column, quote(row), quote(rec)))
	}
	payload := r.firstPayload.String
	switch {
	case !r.firstKind.Valid:
		si.Changed = append(si.Changed, "the store holds no record 1 of the session; what is shown is the row's unsigned copy")
		payload = r.payload
	case r.firstKind.String != string(entry.KindSession):
		si.Changed = append(si.Changed, fmt.Sprintf("record 1 is a %s record, not the session record; what is shown is the row's unsigned copy", quote(r.firstKind.String)))
		payload = r.payload
	}
	if err := json.Unmarshal([]byte(payload), &si.Session); err != nil {
		return si, fmt.Errorf("session %s record 1: %w", r.id, err)
	}
	si.BoardKey = si.Session.BoardKey
	if r.lastKind.String == string(entry.KindSessionEnd) {
		si.End = new(entry.SessionEnd)
		if err := json.Unmarshal([]byte(r.lastPayload.String), si.End); err != nil {
			return si, fmt.Errorf("session %s record %d (session_end): %w", r.id, r.lastSeq.Int64, err)
		}
	}
	if len(si.Changed) > 0 {
		return si, nil
	}
	s := &si.Session
	if r.board != s.BoardKey {
		differ("board", r.board, s.BoardKey)
	}
	if r.site != s.Site {
		differ("site", r.site, s.Site)
	}
	if r.room != s.Room {
		differ("room", r.room, s.Room)
	}
	if r.model != s.IntensifierModel {
		differ("model", r.model, s.IntensifierModel)
	}
	if r.serial != s.IntensifierSerial {
		differ("serial", r.serial, s.IntensifierSerial)
	}
	if r.startedNs != s.Started.UnixNano() {
		differ("started", time.Unix(0, r.startedNs).UTC().Format(time.RFC3339Nano), s.Started.UTC().Format(time.RFC3339Nano))
	}
	if r.payload != r.firstPayload.String {
		differ("payload", shorten(r.payload), shorten(r.firstPayload.String))
	}
	if r.high != r.lastSeq.Int64 {
		differ("high (the last record)", r.high, r.lastSeq.Int64)
	}
	if r.head != r.lastHash.String {
		differ("head (the last record's hash)", r.head, r.lastHash.String)
	}
	if ended := si.End != nil; (r.ended != 0) != ended {
		differ("ended", r.ended != 0, ended)
	}
	if si.End != nil && (!r.endPayload.Valid || r.endPayload.String != r.lastPayload.String) {
		differ("end_payload", shorten(r.endPayload.String), shorten(r.lastPayload.String))
	}
	return si, nil
}

// quote prints a value of a row for a message: strings quoted with their
// control characters escaped (a row can hold anything).
func quote(v any) string {
	if s, ok := v.(string); ok {
		return fmt.Sprintf("%q", s)
	}
	return fmt.Sprint(v)
}

// shorten keeps a payload's first 60 bytes for a message.
func shorten(s string) string {
	if len(s) > 60 {
		return s[:60] + "…"
	}
	return s
}

// HistoryPoint is one result of one session of an intensifier.
type HistoryPoint struct {
	Session string
	Date    time.Time // session start
	Site    string
	Room    string
	Result  entry.Result
}

// History returns every result the store's results index holds for the
// intensifier serial, oldest session first, in record order within a
// session. The result is read from its record and the session's date,
// site and room from the session record, which verify (a signature covers
// them), not from the rows that index them: an edit of a row must not
// reach a trend or a report's history. That the index holds every result
// of the intensifier and no other's is checked by
// report.VerifyStoreSerial.
func (s *Store) History(ctx context.Context, serial string) ([]HistoryPoint, error) {
	rows, err := s.db.QueryContext(ctx, s.q(`SELECT r.session, r.seq, rec.payload
		FROM results r JOIN records rec ON rec.session = r.session AND rec.seq = r.seq AND rec.kind = 'result'
		WHERE r.serial = ? ORDER BY r.session, r.seq`), serial)
	if err != nil {
		return nil, fmt.Errorf("store %s: history of %s: %w", s.name, serial, err)
	}
	type point struct {
		HistoryPoint
		seq int64
	}
	var out []point
	for rows.Next() {
		var p point
		var payload string
		if err := rows.Scan(&p.Session, &p.seq, &payload); err != nil {
			rows.Close()
			return nil, fmt.Errorf("store %s: history of %s: %w", s.name, serial, err)
		}
		if err := json.Unmarshal([]byte(payload), &p.Result); err != nil {
			rows.Close()
			return nil, fmt.Errorf("store %s: history of %s: session %s record %d: %w", s.name, serial, p.Session, p.seq, err)
		}
		out = append(out, p)
	}
	rows.Close()
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("store %s: history of %s: %w", s.name, serial, err)
	}
	// Each session's date, site and room from its session record (read
	// after the rows are closed: SQLite's store has one connection).
	var first *sql.Stmt
	if len(out) > 0 {
		if first, err = s.db.PrepareContext(ctx, s.q(`SELECT payload FROM records WHERE session = ? AND seq = 1 AND kind = 'session'`)); err != nil {
			return nil, fmt.Errorf("store %s: history of %s: %w", s.name, serial, err)
		}
		defer first.Close()
	}
	sessions := map[string]entry.Session{}
	for i := range out {
		p := &out[i]
		sess, ok := sessions[p.Session]
		if !ok {
			var payload string
			err := first.QueryRowContext(ctx, p.Session).Scan(&payload)
			if err == nil {
				err = json.Unmarshal([]byte(payload), &sess)
			}
			if err != nil {
				return nil, fmt.Errorf("store %s: history of %s: session %s record 1: %w", s.name, serial, p.Session, err)
			}
			sessions[p.Session] = sess
		}
		p.Date, p.Site, p.Room = sess.Started.UTC(), sess.Site, sess.Room
	}
	sort.SliceStable(out, func(i, j int) bool {
		if !out[i].Date.Equal(out[j].Date) {
			return out[i].Date.Before(out[j].Date)
		}
		return false // by session and record, as read
	})
	hs := make([]HistoryPoint, len(out))
	for i := range out {
		hs[i] = out[i].HistoryPoint
	}
	return hs, nil
}

// Misfiled returns the sessions whose signed session record names the
// intensifier serial while their row in the store files them under
// another serial. Such a row (its serial edited, with its results index)
// would otherwise take a session out of the intensifier's trend unseen.
// Candidates are found by the record's text (a LIKE over record 1 of every
// session, one indexed lookup each, no decoding) and confirmed by reading
// the session as Session does.
func (s *Store) Misfiled(ctx context.Context, serial string) ([]SessionInfo, error) {
	rows, err := s.db.QueryContext(ctx, s.q(`SELECT s.id FROM sessions s JOIN records f ON f.session = s.id AND f.seq = 1
		WHERE s.serial <> ? AND f.payload LIKE ? ESCAPE '!'`), serial, serialPattern(serial))
	if err != nil {
		return nil, fmt.Errorf("store %s: sessions of %s: %w", s.name, serial, err)
	}
	var ids []string
	for rows.Next() {
		var id string
		if err := rows.Scan(&id); err != nil {
			rows.Close()
			return nil, fmt.Errorf("store %s: sessions of %s: %w", s.name, serial, err)
		}
		ids = append(ids, id)
	}
	rows.Close()
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("store %s: sessions of %s: %w", s.name, serial, err)
	}
	var out []SessionInfo
	for _, id := range ids {
		si, err := s.Session(ctx, id)
		if err != nil {
			return nil, err
		}
		if si.Session.IntensifierSerial == serial {
			out = append(out, si)
		}
	}
	return out, nil
}

// Gap is a session a store lacks although a stored session's signed
// record names it as the one its board began just before.
type Gap struct {
	Missing string // the session the store lacks
	Next    string // the stored session that names it
	Board   string // the board's key (hex), as the next session says
}

// MissingBefore returns the sessions of intensifier serial that stored
// sessions (of any intensifier: a board measures several) name as their
// board's previous session (entry.Session.PrevSession) and that the store
// does not hold, its row or its first record gone: a session deleted from
// the store, which nothing else in it shows. The last session a board
// sent has no next one yet to name it; sessions begun before boards named
// their predecessor name none.
func (s *Store) MissingBefore(ctx context.Context, serial string) ([]Gap, error) {
	rows, err := s.db.QueryContext(ctx, s.q(`SELECT session, payload FROM records WHERE seq = 1 AND kind = 'session' AND payload LIKE ? ESCAPE '!'`), fieldPattern("prev_serial", serial))
	if err != nil {
		return nil, fmt.Errorf("store %s: sessions naming one of %s before them: %w", s.name, serial, err)
	}
	var next []Gap
	for rows.Next() {
		var id, payload string
		if err := rows.Scan(&id, &payload); err != nil {
			rows.Close()
			return nil, fmt.Errorf("store %s: sessions naming one of %s before them: %w", s.name, serial, err)
		}
		var sess entry.Session
		if json.Unmarshal([]byte(payload), &sess) != nil || sess.PrevSerial != serial || sess.PrevSession == "" {
			continue
		}
		next = append(next, Gap{Missing: sess.PrevSession, Next: id, Board: sess.BoardKey})
	}
	rows.Close()
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("store %s: sessions naming one of %s before them: %w", s.name, serial, err)
	}
	var out []Gap
	for _, g := range next {
		var n int
		if err := s.db.QueryRowContext(ctx, s.q(`SELECT count(*) FROM sessions s JOIN records f ON f.session = s.id AND f.seq = 1 WHERE s.id = ?`), g.Missing).Scan(&n); err != nil {
			return nil, fmt.Errorf("store %s: session %s: %w", s.name, g.Missing, err)
		}
		if n == 0 {
			out = append(out, g)
		}
	}
	return out, nil
}

// serialPattern is a LIKE pattern (escape character '!') matching the
// JSON text of a session record that names serial. A character JSON may
// write escaped or not matches any text there: the pattern finds
// candidates, which are then decoded.
func serialPattern(serial string) string {
	return fieldPattern("intensifier_serial", serial)
}

// fieldPattern is serialPattern for the JSON string field name.
func fieldPattern(name, serial string) string {
	var b strings.Builder
	b.WriteString(`%"` + name + `":"`)
	for _, r := range serial {
		switch {
		case r == '%' || r == '_' || r == '!':
			b.WriteRune('!')
			b.WriteRune(r)
		case r < 0x20 || r > 0x7e || r == '"' || r == '\\' || r == '<' || r == '>' || r == '&':
			b.WriteByte('%')
		default:
			b.WriteRune(r)
		}
	}
	b.WriteString(`"%`)
	return b.String()
}
