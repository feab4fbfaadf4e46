package report

import (
	"bufio"
	"bytes"
	"context"
	"crypto/ed25519"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"

	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/store"
	"kermalux/firmware-host/journal/transfer/wire"
	"kermalux/procedures/entry"
)

// ErrUnverified is wrapped by the error of a report refused because its
// records do not verify.
var ErrUnverified = errors.New("records do not verify")

// UnverifiedError is a source whose records do not verify: what was
// found, each naming the record.
type UnverifiedError struct {
	Source   string
	Problems []string
}

func (e *UnverifiedError) Error() string {
	s := fmt.Sprintf("%s: %d problem(s), no report rendered: %s", e.Source, len(e.Problems), e.Problems[0])
	return s + " (kermalux journal verify names them all; --unverified renders it stamped NOT VERIFIED on every page)"
}

// Unwrap lets errors.Is(err, ErrUnverified) find it.
func (e *UnverifiedError) Unwrap() error { return ErrUnverified }

// VerifyJournalFile checks a board journal before its records are read:
// the SQLite journal as `kermalux journal verify` does (chains, signatures,
// signed heads, the high-water mark, SQLite's integrity), or a JSON-lines
// export by each session's chain and signatures against the key its
// session record names (an export carries no signed head: records cut from
// its end would not show). It returns what is wrong, one line each.
func VerifyJournalFile(ctx context.Context, path string) ([]string, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("journal %s: %w", path, err)
	}
	head := make([]byte, 16)
	n, _ := io.ReadFull(f, head)
	if bytes.HasPrefix(head[:n], []byte("SQLite format 3\x00")) || n == 0 {
		f.Close()
		rep, err := journal.Verify(ctx, path)
		if err != nil {
			return nil, err
		}
		return problemLines(rep.Problems), nil
	}
	defer f.Close()
	if _, err := f.Seek(0, io.SeekStart); err != nil {
		return nil, fmt.Errorf("journal %s: %w", path, err)
	}
	sessions := map[string][]journal.Record{}
	var order []string
	sc := bufio.NewScanner(f)
	sc.Buffer(make([]byte, 64*1024), 16*1024*1024)
	line := 0
	for sc.Scan() {
		line++
		b := bytes.TrimSpace(sc.Bytes())
		if len(b) == 0 {
			continue
		}
		var r journal.Record
		if err := json.Unmarshal(b, &r); err != nil {
			return []string{fmt.Sprintf("%s:%d: not a journal record: %v", path, line, err)}, nil
		}
		if _, ok := sessions[r.Session]; !ok {
			order = append(order, r.Session)
		}
		sessions[r.Session] = append(sessions[r.Session], r)
	}
	if err := sc.Err(); err != nil {
		return nil, fmt.Errorf("%s:%d: %w", path, line+1, err)
	}
	var out []string
	for _, id := range order {
		if p := checkWithOwnKey(sessions[id]); p != nil {
			out = append(out, p.String())
		}
	}
	return out, nil
}

// checkWithOwnKey checks a session's records against the board key its
// first record names.
func checkWithOwnKey(recs []journal.Record) *journal.Problem {
	if len(recs) == 0 {
		return nil
	}
	var s entry.Session
	if recs[0].Kind == entry.KindSession {
		_ = json.Unmarshal(recs[0].Payload, &s)
	}
	key, err := journal.ParsePublicKey(s.BoardKey)
	if err != nil {
		return &journal.Problem{Session: recs[0].Session, Seq: recs[0].Seq, Kind: recs[0].Kind, What: "no board key to check the session against: " + err.Error()}
	}
	return journal.CheckSession(key, recs)
}

// VerifyStoreSession checks a stored session before it is reported: the
// key its session record names is enrolled in the store; every record's
// hash and link; each signed head the store kept (the segment signatures
// of what was pushed) verifies with that key and names the hash of its
// last record; and the last head covers the last record. Records stored
// with their own signatures are checked by them too. Then the store's
// session row, which no signature covers, against those records (its
// site, room, model, serial, start, payloads and mark): a row edited in
// the store is named, column by column (store.SessionInfo.Changed).
func VerifyStoreSession(ctx context.Context, st *store.Store, id string) ([]string, error) {
	problems, err := verifyStoreRecords(ctx, st, id)
	if err != nil || len(problems) > 0 {
		return problems, err
	}
	info, err := st.Session(ctx, id)
	if err != nil {
		return nil, err
	}
	for _, c := range info.Changed {
		problems = append(problems, fmt.Sprintf("session %s: %s", id, c))
	}
	return problems, nil
}

// verifyStoreRecords is VerifyStoreSession's check of the records.
func verifyStoreRecords(ctx context.Context, st *store.Store, id string) ([]string, error) {
	recs, err := st.Records(ctx, id, 0, 0)
	if err != nil {
		return nil, err
	}
	if len(recs) == 0 {
		return nil, fmt.Errorf("store %s: no session %s", st.Path(), id)
	}
	var s entry.Session
	if recs[0].Kind == entry.KindSession {
		_ = json.Unmarshal(recs[0].Payload, &s)
	}
	key, err := journal.ParsePublicKey(s.BoardKey)
	if err != nil {
		return []string{fmt.Sprintf("session %s record 1: no board key to check the session against: %v", id, err)}, nil
	}
	boards, err := st.Boards(ctx)
	if err != nil {
		return nil, err
	}
	enrolled := false
	for _, b := range boards {
		enrolled = enrolled || b.Key == s.BoardKey
	}
	if !enrolled {
		return []string{fmt.Sprintf("session %s: signed by board key %s, which this store has not enrolled", id, s.BoardKey)}, nil
	}
	if p := journal.CheckHashChain(recs); p != nil {
		return []string{p.String()}, nil
	}
	for _, r := range recs {
		if r.Sig != "" {
			if err := r.Check(key); err != nil {
				return []string{(&journal.Problem{Session: id, Seq: r.Seq, Kind: r.Kind, What: err.Error()}).String()}, nil
			}
		}
	}
	proofs, err := st.Proofs(ctx, id)
	if err != nil {
		return nil, err
	}
	covered := int64(0)
	for _, p := range proofs {
		head, herr := hex.DecodeString(p.Head)
		sig, serr := hex.DecodeString(p.Sig)
		switch {
		case p.First < 1 || p.Last > int64(len(recs)) || p.Last < p.First:
			return []string{fmt.Sprintf("session %s: a signed head names records %d..%d, the store holds %d", id, p.First, p.Last, len(recs))}, nil
		case herr != nil || serr != nil || recs[p.Last-1].Hash != p.Head:
			return []string{fmt.Sprintf("session %s record %d: its hash %.12s… is not the one the signed head names (%.12s…): the record was changed in the store", id, p.Last, recs[p.Last-1].Hash, p.Head)}, nil
		case !ed25519.Verify(key, wire.SegmentMessage(key, p.Audience, id, p.First, p.Last-p.First+1, head), sig):
			return []string{fmt.Sprintf("session %s records %d..%d: the signed head does not verify with board key %s", id, p.First, p.Last, s.BoardKey)}, nil
		}
		covered = max(covered, p.Last)
	}
	if last := recs[len(recs)-1]; covered < last.Seq && last.Sig == "" {
		return []string{fmt.Sprintf("session %s: records %d..%d are vouched for by no signed head", id, covered+1, last.Seq)}, nil
	}
	return nil, nil
}

// VerifyStoreSerial checks every stored session of an intensifier (what a
// trend is computed from): the sessions the store indexes under serial,
// each with its row checked against its records (VerifyStoreSession), and
// those whose signed session record names serial while the store files
// them under another (store.Misfiled).
func VerifyStoreSerial(ctx context.Context, st *store.Store, serial string) ([]string, error) {
	infos, err := st.Sessions(ctx, store.Query{Serial: serial})
	if err != nil {
		return nil, err
	}
	var out []string
	for _, in := range infos {
		ps, err := VerifyStoreSession(ctx, st, in.ID)
		if err != nil {
			return nil, err
		}
		out = append(out, ps...)
	}
	// The results index that History reads must hold every result record
	// of these sessions and no other session's: a deleted or moved row
	// would hide a result from the trend while every record verifies.
	hs, err := st.History(ctx, serial)
	if err != nil {
		return nil, err
	}
	indexed := map[string]int{}
	for _, h := range hs {
		indexed[h.Session]++
	}
	for _, in := range infos {
		recs, err := st.Records(ctx, in.ID, 0, 0)
		if err != nil {
			return nil, err
		}
		n := 0
		for _, r := range recs {
			if r.Kind == entry.KindResult {
				n++
			}
		}
		if n != indexed[in.ID] {
			out = append(out, fmt.Sprintf("session %s: %d result records, %d in the store's results index of intensifier %s (the index was changed)", in.ID, n, indexed[in.ID], serial))
		}
		delete(indexed, in.ID)
	}
	for id, n := range indexed {
		out = append(out, fmt.Sprintf("session %s: %d results indexed under intensifier %s, which the store's session does not name (the index was changed)", id, n, serial))
	}
	// A session the store files under another serial while its signed
	// record names this one: its row was edited away from this trend.
	moved, err := st.Misfiled(ctx, serial)
	if err != nil {
		return nil, err
	}
	for _, m := range moved {
		for _, c := range m.Changed {
			out = append(out, fmt.Sprintf("session %s: %s; its signed session record names intensifier %q", m.ID, c, serial))
		}
	}
	// A session of this intensifier deleted from the store whole: the
	// board's next session names it as the one before (store.MissingBefore).
	gaps, err := st.MissingBefore(ctx, serial)
	if err != nil {
		return nil, err
	}
	for _, g := range gaps {
		out = append(out, fmt.Sprintf("session %s of intensifier %s is not in the store, yet session %s, begun next on board %s, names it as the one before: it was deleted from the store, or never sent here", g.Missing, serial, g.Next, abbrevHex(g.Board)))
	}
	return out, nil
}

func problemLines(ps []journal.Problem) []string {
	out := make([]string, len(ps))
	for i, p := range ps {
		out[i] = p.String()
	}
	return out
}

// gate applies a verification's outcome to a report being built: none,
// or refused, or (when the user forced it) stamped.
func gate(source string, problems []string, allowUnverified bool) error {
	if len(problems) == 0 {
		return nil
	}
	if !allowUnverified {
		return &UnverifiedError{Source: source, Problems: problems}
	}
	return nil
}

// stamp marks r as built from records that do not verify: the problems
// go on every page of the HTML and PDF, first in the CSVs, and first in
// what needs review.
func (r *Report) stamp(problems []string) {
	if len(problems) == 0 {
		return
	}
	r.Unverified = problems
	r.Review = append([]string{"The records do not verify (" + problems[0] + "): this report cannot be trusted."}, r.Review...)
}

// UnverifiedText is the stamp's words.
func (r *Report) UnverifiedText() string {
	if len(r.Unverified) == 0 {
		return ""
	}
	s := "NOT VERIFIED: the journal this report comes from does not verify, so its records may have been changed. " + r.Unverified[0]
	if len(r.Unverified) > 1 {
		s += fmt.Sprintf(" (and %d more)", len(r.Unverified)-1)
	}
	return s
}
