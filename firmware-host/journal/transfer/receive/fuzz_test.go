package receive

import (
	"bytes"
	"context"
	"crypto/ed25519"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"math/rand/v2"
	"net/http"
	"net/http/httptest"
	"testing"

	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/store"
	"kermalux/firmware-host/journal/transfer/wire"
)

// FuzzReceive posts arbitrary bodies to the receiver's two endpoints (the
// first byte chooses: even a push, odd a marks request) over one store
// with one enrolled board. Whatever the body, the receiver answers with
// one of the protocol's statuses and a JSON body (a refusal with a code
// and a reason, or the endpoint's answer), never panics, and the store
// holds only records that its kept signed heads prove (chain recomputed,
// signature verified with the enrolled key).
func FuzzReceive(f *testing.F) {
	seed := make([]byte, 32)
	seed[0] = 61
	owner := keySigner{ed25519.NewKeyFromSeed(seed)}
	st := workstation(f, "sqlite", owner.PublicKey())
	h := Handler(st, Options{Log: quiet})
	rng := rand.New(rand.NewPCG(1, 2))
	recs := fleetSession(1, rng)
	stream := func(audience string, segs ...[]journal.Record) []byte {
		var b bytes.Buffer
		w, _ := wire.NewWriter(&b, wire.KindPush, audience, owner)
		for _, s := range segs {
			w.Segment(s)
		}
		w.Close()
		return b.Bytes()
	}
	good := stream(st.ID(), recs[:5], recs[5:])
	f.Add(append([]byte{0}, good...))
	f.Add(append([]byte{0}, good[:len(good)/2]...))
	f.Add(append([]byte{0}, stream("kxs-elsewhere", recs)...))
	f.Add(append([]byte{0}, stream(st.ID(), recs[3:])...))
	marks, _ := json.Marshal(wire.MarksRequest{Board: hex.EncodeToString(owner.PublicKey()), Sessions: []string{recs[0].Session, "x"}})
	f.Add(append([]byte{1}, marks...))
	f.Add([]byte{1, '{', '"', 'b'})
	f.Add([]byte{0})
	allowed := map[int]bool{http.StatusOK: true, http.StatusBadRequest: true, http.StatusForbidden: true, http.StatusConflict: true,
		http.StatusRequestEntityTooLarge: true, http.StatusServiceUnavailable: true}
	f.Fuzz(func(t *testing.T, data []byte) {
		if len(data) == 0 {
			return
		}
		path := wire.PathPush
		if data[0]%2 == 1 {
			path = wire.PathMarks
		}
		req := httptest.NewRequest(http.MethodPost, path, bytes.NewReader(data[1:]))
		rec := httptest.NewRecorder()
		h.ServeHTTP(rec, req)
		if !allowed[rec.Code] {
			t.Fatalf("status %d: %s", rec.Code, rec.Body)
		}
		var answer map[string]any
		if err := json.Unmarshal(rec.Body.Bytes(), &answer); err != nil {
			t.Fatalf("status %d: the answer is not JSON: %q", rec.Code, rec.Body)
		}
		if rec.Code != http.StatusOK && (answer["error"] == "" || answer["reason"] == "") {
			t.Fatalf("status %d without a refusal code and reason: %q", rec.Code, rec.Body)
		}
		if err := proven(st, owner.PublicKey()); err != nil {
			t.Fatal(err)
		}
	})
}

// proven checks every session of the store with provenSession.
func proven(st *store.Store, pub ed25519.PublicKey) error {
	sessions, err := st.Sessions(context.Background(), store.Query{})
	if err != nil {
		return err
	}
	for _, s := range sessions {
		if err := provenSession(st, pub, s.ID); err != nil {
			return err
		}
	}
	return nil
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
