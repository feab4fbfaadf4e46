package receive

import (
	"bytes"
	"context"
	"crypto/ed25519"
	"encoding/json"
	"math/rand/v2"
	"strconv"
	"strings"
	"testing"
	"time"

	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/store"
	"kermalux/firmware-host/journal/store/storetest"
	"kermalux/firmware-host/journal/transfer/wire"
	"kermalux/procedures/entry"
)

// TestUndecodablePayloadRefusedByNumber: a board's key signs whatever its
// software writes, so a result whose payload is not a result (a value
// that is a word) reaches the store correctly chained and signed. The
// store decodes such payloads (on the decoding goroutine, store.Parse) and
// must refuse the bundle naming the record, storing nothing of it, and
// take the same session with the payload mended.
func TestUndecodablePayloadRefusedByNumber(t *testing.T) {
	storetest.Each(t, func(t *testing.T, backend string) {
		ctx := context.Background()
		seed := bytes.Repeat([]byte{9}, ed25519.SeedSize)
		signer := keySigner{ed25519.NewKeyFromSeed(seed)}
		st := workstation(t, backend, signer.PublicKey())
		bundle := func(recs []journal.Record) *bytes.Buffer {
			var buf bytes.Buffer
			w, err := wire.NewWriter(&buf, wire.KindBundle, "", signer)
			if err != nil {
				t.Fatal(err)
			}
			if err := w.Segment(recs); err != nil {
				t.Fatal(err)
			}
			if err := w.Close(); err != nil {
				t.Fatal(err)
			}
			return &buf
		}
		good := fleetSession(1, rand.New(rand.NewPCG(1, 2)))
		var payloads []struct {
			kind entry.Kind
			v    any
		}
		badSeq := int64(0)
		for _, r := range good {
			v := any(json.RawMessage(r.Payload))
			if r.Kind == entry.KindResult && badSeq == 0 {
				v, badSeq = map[string]any{"quantity": "conversion_factor", "value": "high"}, r.Seq
			}
			payloads = append(payloads, struct {
				kind entry.Kind
				v    any
			}{r.Kind, v})
		}
		// fleetSession(1)'s start, step and boot id: the same session, one payload changed.
		bad := chain(good[0].Session, time.Date(2007, 2, 2, 9, 0, 0, 0, time.UTC), time.Minute, good[0].BootID, payloads)
		if bad[0].Hash != good[0].Hash || bad[badSeq-1].Hash == good[badSeq-1].Hash {
			t.Fatal("the changed session should differ from the good one from the changed result on, not before")
		}
		_, err := Import(ctx, st, bundle(bad), "bad.kxb", nil)
		want := "record " + strconv.FormatInt(badSeq, 10) + ": result payload"
		if err == nil || !strings.Contains(err.Error(), want) {
			t.Fatalf("import of a result whose value is a word: err = %v, want it to name %q", err, want)
		}
		if ss, err := st.Sessions(ctx, store.Query{}); err != nil || len(ss) != 0 {
			t.Fatalf("after the refused bundle the store holds %d sessions (%v), want none", len(ss), err)
		}
		sum, err := Import(ctx, st, bundle(good), "good.kxb", nil)
		if err != nil || sum.Stored != int64(len(good)) {
			t.Fatalf("the mended session: %+v, %v; want %d records stored", sum, err, len(good))
		}
	})
}
