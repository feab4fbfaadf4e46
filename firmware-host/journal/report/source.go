package report

import (
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"strings"

	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/store"
	"kermalux/procedures/entry"
)

// StoreHistory adapts the workstation store to HistorySource.
type StoreHistory struct{ Store *store.Store }

// History implements HistorySource.
func (s StoreHistory) History(ctx context.Context, serial string) ([]HistoryPoint, error) {
	hs, err := s.Store.History(ctx, serial)
	if err != nil {
		return nil, err
	}
	// The session records say which sessions were simulated.
	infos, err := s.Store.Sessions(ctx, store.Query{Serial: serial})
	if err != nil {
		return nil, err
	}
	sim := map[string]bool{}
	for _, in := range infos {
		sim[in.ID] = in.Session.Simulated
	}
	out := make([]HistoryPoint, len(hs))
	for i, h := range hs {
		out[i] = HistoryPoint{Session: h.Session, Date: h.Date, Site: h.Site, Room: h.Room, Result: h.Result, Simulated: sim[h.Session]}
	}
	return out, nil
}

// ErrNoSession means a journal or store holds no session to report.
var ErrNoSession = errors.New("no session to report")

// JournalSessions reads every session of a board journal: either the
// board's SQLite journal file (read only, no key needed) or its export as
// JSON lines (`kermalux journal export FILE --json`). Sessions are in the
// order they began; each session's envelopes in sequence order.
func JournalSessions(ctx context.Context, path string) ([][]entry.Envelope, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("journal %s: %w", path, err)
	}
	head := make([]byte, 16)
	n, _ := io.ReadFull(f, head)
	head = head[:n]
	if bytes.HasPrefix(head, []byte("SQLite format 3\x00")) {
		f.Close()
		return sqliteSessions(ctx, path)
	}
	if _, err := f.Seek(0, io.SeekStart); err != nil {
		f.Close()
		return nil, fmt.Errorf("journal %s: %w", path, err)
	}
	defer f.Close()
	return ReadExport(f, path)
}

func sqliteSessions(ctx context.Context, path string) ([][]entry.Envelope, error) {
	var out [][]entry.Envelope
	index := map[string]int{}
	err := journal.Export(ctx, path, func(rec journal.Record) error {
		env, err := rec.Envelope()
		if err != nil {
			return fmt.Errorf("journal %s: session %s record %d: %w", path, rec.Session, rec.Seq, err)
		}
		i, ok := index[rec.Session]
		if !ok {
			i = len(out)
			index[rec.Session] = i
			out = append(out, nil)
		}
		out[i] = append(out[i], env)
		return nil
	})
	if err != nil {
		return nil, err
	}
	if len(out) == 0 {
		return nil, fmt.Errorf("journal %s: %w", path, ErrNoSession)
	}
	return out, nil
}

// ReadExport reads journal records written one JSON object per line (the
// journal's export format) and groups them by session, in order of first
// appearance. A line that is not a record is an error naming name and the
// line number. Blank lines are skipped.
func ReadExport(r io.Reader, name string) ([][]entry.Envelope, error) {
	sc := bufio.NewScanner(r)
	sc.Buffer(make([]byte, 64*1024), 16*1024*1024)
	var out [][]entry.Envelope
	index := map[string]int{}
	line := 0
	for sc.Scan() {
		line++
		b := bytes.TrimSpace(sc.Bytes())
		if len(b) == 0 {
			continue
		}
		var rec journal.Record
		dec := json.NewDecoder(bytes.NewReader(b))
		if err := dec.Decode(&rec); err != nil {
			return nil, fmt.Errorf("%s:%d: not a journal record (one JSON object per line expected): %w", name, line, err)
		}
		if dec.More() {
			return nil, fmt.Errorf("%s:%d: more than one JSON value on the line", name, line)
		}
		if rec.Session == "" || rec.Kind == "" || rec.Seq <= 0 {
			return nil, fmt.Errorf("%s:%d: record without session, kind or a positive seq", name, line)
		}
		env, err := rec.Envelope()
		if err != nil {
			return nil, fmt.Errorf("%s:%d: %w", name, line, err)
		}
		i, ok := index[rec.Session]
		if !ok {
			i = len(out)
			index[rec.Session] = i
			out = append(out, nil)
		}
		out[i] = append(out[i], env)
	}
	if err := sc.Err(); err != nil {
		return nil, fmt.Errorf("%s:%d: %w", name, line+1, err)
	}
	if len(out) == 0 {
		return nil, fmt.Errorf("%s: %w", name, ErrNoSession)
	}
	return out, nil
}

// PickSession chooses the session with the given id, or the last one when
// id is empty.
func PickSession(sessions [][]entry.Envelope, id, from string) ([]entry.Envelope, error) {
	if len(sessions) == 0 {
		return nil, fmt.Errorf("%s: %w", from, ErrNoSession)
	}
	if id == "" {
		return sessions[len(sessions)-1], nil
	}
	var ids []string
	for _, s := range sessions {
		if len(s) > 0 && s[0].Session == id {
			return s, nil
		}
		if len(s) > 0 {
			ids = append(ids, s[0].Session)
		}
	}
	shown := ids
	if len(shown) > 8 {
		shown = append(shown[:4:4], "…")
		shown = append(shown, ids[len(ids)-3:]...)
	}
	return nil, fmt.Errorf("%s: no session %q (it has %d: %s)", from, id, len(ids), strings.Join(shown, ", "))
}
