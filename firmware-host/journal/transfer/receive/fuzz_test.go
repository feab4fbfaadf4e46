package receive

import (
	"bytes"
	"context"
	"crypto/ed25519"
	"database/sql"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"io"
	"maps"
	"net/http"
	"net/http/httptest"
	"net/url"
	"strings"
	"testing"
	"time"

	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/store"
	"kermalux/firmware-host/journal/transfer/wire"
	"kermalux/procedures/entry"
)

// fuzzStore is the store the receiving fuzz targets write into: one
// enrolled board, a commit watcher checked before fuzzing, and a short
// session of that board to make seed streams of.
type fuzzStore struct {
	owner   keySigner
	st      *store.Store
	changed func() bool
	// Short records keep the seeds short: the fuzzer's minimiser runs a
	// number of inputs that grows with the square of an input's length,
	// and while it runs nothing else is fuzzed.
	recs []journal.Record
}

func newFuzzStore(f *testing.F) *fuzzStore {
	seed := make([]byte, 32)
	seed[0] = 61
	fs := &fuzzStore{owner: keySigner{ed25519.NewKeyFromSeed(seed)}, recs: shortSession()}
	fs.st = workstation(f, "sqlite", fs.owner.PublicKey())
	fs.changed = commits(f, fs.st)
	// The watcher must see a commit and nothing else.
	fs.changed()
	if fs.changed() {
		f.Fatal("the commit watcher saw a change with no commit")
	}
	fs.st.Note(context.Background(), "", "fuzz: checking the commit watcher", "")
	if !fs.changed() {
		f.Fatal("the commit watcher missed a commit")
	}
	return fs
}

// stream is a stream of kind for audience, one segment per element of segs.
func (fs *fuzzStore) stream(kind byte, audience string, segs ...[]journal.Record) []byte {
	var b bytes.Buffer
	w, _ := wire.NewWriter(&b, kind, audience, fs.owner)
	for _, s := range segs {
		w.Segment(s)
	}
	w.Close()
	return b.Bytes()
}

// FuzzReceive posts damaged bodies to the receiver's two endpoints over
// one store with one enrolled board. Whatever the body, the receiver
// answers with one of the protocol's statuses and a JSON body (a refusal
// with a code and a reason, or the endpoint's answer), never panics, and
// the store holds only records that its kept signed heads prove (chain
// recomputed, signature verified with the enrolled key). An input edits
// one of a few real bodies (pushes whole, cut, for another store, with a
// gap; marks requests), writing patch at at over drop bytes; with drop
// over the whole body, any body can be posted. Inputs stay a few bytes
// long (the minimiser's cost grows with the square of an input's length).
func FuzzReceive(f *testing.F) {
	fs := newFuzzStore(f)
	st, recs := fs.st, fs.recs
	h := Handler(st, Options{Log: quiet})
	good := fs.stream(wire.KindPush, st.ID(), recs[:1], recs[1:])
	marks, _ := json.Marshal(wire.MarksRequest{Board: hex.EncodeToString(fs.owner.PublicKey()), Sessions: []string{recs[0].Session, "x"}})
	bases := []struct {
		path string
		body []byte
	}{
		{wire.PathPush, good},
		{wire.PathPush, good[:len(good)/2]},
		{wire.PathPush, fs.stream(wire.KindPush, "kxs-elsewhere", recs[:1])},
		{wire.PathPush, fs.stream(wire.KindPush, st.ID(), recs[2:])},
		{wire.PathPush, fs.stream(wire.KindBundle, "", recs[:1])},
		{wire.PathMarks, marks},
		{wire.PathMarks, []byte(`{"b`)},
	}
	for i := range bases {
		f.Add(uint8(i), uint16(0), uint16(0), []byte{})
	}
	f.Add(uint8(0), uint16(40), uint16(1), []byte{0}) // a byte of the preamble's key
	f.Add(uint8(5), uint16(0), uint16(999), []byte{}) // an empty marks request
	f.Fuzz(func(t *testing.T, base uint8, at, drop uint16, patch []byte) {
		b := bases[int(base)%len(bases)]
		off := int(at) % (len(b.body) + 1)
		end := min(off+int(drop), len(b.body))
		body := append(append(append([]byte{}, b.body[:off]...), patch...), b.body[end:]...)
		receiveOnce(t, h, st, fs.owner.PublicKey(), fs.changed, b.path, body)
	})
}

// FuzzImport imports damaged bundles into a store with one enrolled
// board. Whatever the bytes, Import never panics, names the bundle in its
// errors, stores only records that the store's kept signed heads prove,
// and stores nothing at all of a bundle it refuses. An input edits one of
// a few real streams (bundles whole, cut, for this store or another, with
// a gap; a push): it writes patch at at over drop bytes, or, when patch
// starts as a stream does, imports patch itself. Inputs stay a few bytes
// long (the minimiser's cost grows with the square of an input's
// length), yet reach every byte.
func FuzzImport(f *testing.F) {
	fs := newFuzzStore(f)
	st, recs := fs.st, fs.recs
	good := fs.stream(wire.KindBundle, "", recs[:1], recs[1:])
	bases := [][]byte{
		good,
		good[:len(good)-8], // the closing signature cut
		fs.stream(wire.KindBundle, st.ID(), recs[:1]),
		fs.stream(wire.KindBundle, "kxs-elsewhere", recs[:1]),
		fs.stream(wire.KindBundle, "", recs[2:]), // a gap
		fs.stream(wire.KindPush, st.ID(), recs[:1]),
	}
	for i := range bases {
		f.Add(uint8(i), uint16(0), uint8(0), []byte{})
	}
	f.Add(uint8(0), uint16(len(good)-70), uint8(1), []byte{0}) // a byte of the closing signature
	f.Add(uint8(0), uint16(0), uint8(0), []byte(wire.Magic))
	held := map[string]int64{}
	f.Fuzz(func(t *testing.T, base uint8, at uint16, drop uint8, patch []byte) {
		data := patch
		if !bytes.HasPrefix(patch, []byte(wire.Magic)) {
			old := bases[int(base)%len(bases)]
			off := int(at) % (len(old) + 1)
			end := min(off+int(drop), len(old))
			data = append(append(append([]byte{}, old[:off]...), patch...), old[end:]...)
		}
		_, err := Import(context.Background(), st, bytes.NewReader(data), "fuzz.kxb", nil)
		if err != nil && !strings.Contains(err.Error(), "fuzz.kxb") {
			t.Fatalf("the error does not name the bundle: %v", err)
		}
		if !fs.changed() {
			return
		}
		counts, perr := provenCounts(st, fs.owner.PublicKey())
		if perr != nil {
			t.Fatal(perr)
		}
		if err != nil && !maps.Equal(counts, held) {
			t.Fatalf("a refused bundle (%v) changed the store: records per session %v, were %v", err, counts, held)
		}
		held = counts
	})
}

// commits returns a function that reports whether anything was committed
// to st's SQLite file since it last asked. It watches from a connection of
// its own (SQLite's data_version changes with every commit made by
// another connection), so the store proofs are recomputed only after a
// request that wrote, without asking the receiver what it did.
func commits(t testing.TB, st *store.Store) func() bool {
	db, err := sql.Open("sqlite", "file:"+st.Path()+"?mode=ro")
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { db.Close() })
	conn, err := db.Conn(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { conn.Close() })
	version, err := conn.PrepareContext(context.Background(), "PRAGMA data_version")
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { version.Close() })
	last := int64(-1)
	return func() bool {
		var v int64
		if err := version.QueryRow().Scan(&v); err != nil {
			t.Fatal(err)
		}
		changed := v != last
		last = v
		return changed
	}
}

var allowedStatus = map[int]bool{http.StatusOK: true, http.StatusBadRequest: true, http.StatusForbidden: true, http.StatusConflict: true,
	http.StatusRequestEntityTooLarge: true, http.StatusServiceUnavailable: true}

// receiveOnce posts body to path and checks the answer and the store.
func receiveOnce(t testing.TB, h http.Handler, st *store.Store, pub ed25519.PublicKey, changed func() bool, path string, body []byte) {
	// Built by hand: httptest.NewRequest parses a whole request line
	// for every input.
	req := (&http.Request{Method: http.MethodPost, URL: &url.URL{Path: path}, Proto: "HTTP/1.1", ProtoMajor: 1, ProtoMinor: 1,
		Header: http.Header{}, Body: io.NopCloser(bytes.NewReader(body)), ContentLength: int64(len(body)),
		Host: "store.invalid", RemoteAddr: "192.0.2.1:1234", RequestURI: path}).WithContext(context.Background())
	rec := httptest.NewRecorder()
	h.ServeHTTP(rec, req)
	if !allowedStatus[rec.Code] {
		t.Fatalf("status %d: %s", rec.Code, rec.Body)
	}
	var answer map[string]any
	if err := json.Unmarshal(rec.Body.Bytes(), &answer); err != nil {
		t.Fatalf("status %d: the answer is not JSON: %q", rec.Code, rec.Body)
	}
	if rec.Code != http.StatusOK && (answer["error"] == "" || answer["reason"] == "") {
		t.Fatalf("status %d without a refusal code and reason: %q", rec.Code, rec.Body)
	}
	if !changed() {
		return
	}
	if err := proven(st, pub); err != nil {
		t.Fatal(err)
	}
}

// shortSession is a session of three short records (the session, a
// reading, the end), chained as a board's journal chains them.
func shortSession() []journal.Record {
	start := time.Date(2026, 5, 6, 8, 0, 0, 0, time.UTC)
	id := start.Format("20060102T150405Z") + "-fz"
	payloads := []struct {
		kind entry.Kind
		v    any
	}{
		{entry.KindSession, entry.Session{ID: id, Site: "Invented Clinic", Procedure: "yearly", Started: start}},
		{entry.KindReading, entry.Reading{Meter: "dosimeter", Quantity: "air_kerma_rate", Value: 0.87, Unit: "µGy/s", Status: "ok"}},
		{entry.KindSessionEnd, entry.SessionEnd{Finished: start.Add(time.Minute), Steps: 1, Outcome: "complete"}},
	}
	return chain(id, start, time.Second, "b1", payloads)
}

// proven checks every session of the store with provenSession.
func proven(st *store.Store, pub ed25519.PublicKey) error {
	_, err := provenCounts(st, pub)
	return err
}

// provenCounts is proven, also giving the records stored per session.
func provenCounts(st *store.Store, pub ed25519.PublicKey) (map[string]int64, error) {
	sessions, err := st.Sessions(context.Background(), store.Query{})
	if err != nil {
		return nil, err
	}
	counts := map[string]int64{}
	for _, s := range sessions {
		if err := provenSession(st, pub, s.ID); err != nil {
			return nil, err
		}
		counts[s.ID] = s.Records
	}
	return counts, nil
}

// provenSession recomputes every stored record's hash of session from its
// contents and the previous hash, and checks that each is covered by a
// kept signed head that verifies with pub.
func provenSession(st *store.Store, pub ed25519.PublicKey, session string) error {
	ctx := context.Background()
	recs, err := st.Records(ctx, session, 0, 0)
	if err != nil {
		return err
	}
	proofs, err := st.Proofs(ctx, session)
	if err != nil {
		return err
	}
	prev, p := journal.ZeroHash(), 0
	for _, r := range recs {
		h := r.ComputeHash()
		if r.Prev != prev || r.Hash != hex.EncodeToString(h[:]) {
			return fmt.Errorf("session %s record %d: stored hash or link to record %d does not hold", session, r.Seq, r.Seq-1)
		}
		prev = r.Hash
		for p < len(proofs) && proofs[p].Last < r.Seq {
			p++
		}
		if p == len(proofs) {
			return fmt.Errorf("session %s record %d: no signed head covers it", session, r.Seq)
		}
		if proofs[p].Last == r.Seq {
			sig, _ := hex.DecodeString(proofs[p].Sig)
			head, _ := hex.DecodeString(r.Hash)
			msg := wire.SegmentMessage(pub, proofs[p].Audience, session, proofs[p].First, proofs[p].Last-proofs[p].First+1, head)
			if !ed25519.Verify(pub, msg, sig) {
				return fmt.Errorf("session %s: the signed head at record %d does not verify", session, r.Seq)
			}
		}
	}
	return nil
}
