package receive

import (
	"bytes"
	"context"
	"crypto/ed25519"
	"encoding/json"
	"fmt"
	"io"
	"math/rand/v2"
	"net/http"
	"net/http/httptest"
	"strings"
	"sync"
	"testing"

	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/store"
	"kermalux/firmware-host/journal/transfer/wire"
)

// oversizedBody is the size of each body of the memory test, as in
// issue 14 (8 parallel bodies of 60 MB held 1.9 GB).
const oversizedBody = 60 << 20

// forgedSigner names an enrolled board in the preamble but signs with
// another key: what someone without the board's key can send.
type forgedSigner struct {
	pub  ed25519.PublicKey
	priv ed25519.PrivateKey
}

func (s forgedSigner) PublicKey() ed25519.PublicKey { return s.pub }
func (s forgedSigner) Sign(m []byte) []byte         { return ed25519.Sign(s.priv, m) }

// bodyKind is one kind of oversized request: a prefix, then random bytes
// up to oversizedBody.
type bodyKind struct {
	name, path string
	prefix     []byte
	status     int    // the answer expected
	error      string // its refusal code
}

// oversizedKinds returns the request kinds of the memory test, against a
// store where enrolled is enrolled: an unknown board's push, an enrolled
// board's preamble followed by garbage, a stream of maximal segments (as
// much decompressed data as the limits let a segment hold, 57 MB in all,
// compressing to a few kilobytes) signed with the wrong key, a marks
// request whose session id never ends, and one from an unknown board.
func oversizedKinds(t testing.TB, st *store.Store, enrolled ed25519.PublicKey) []bodyKind {
	seed := make([]byte, 32)
	seed[0] = 99
	stranger := keySigner{ed25519.NewKeyFromSeed(seed)}
	seed[0] = 98
	forger := forgedSigner{pub: enrolled, priv: ed25519.NewKeyFromSeed(seed)}
	stream := func(s wire.Signer, recs []journal.Record) []byte {
		var b bytes.Buffer
		w, err := wire.NewWriter(&b, wire.KindPush, st.ID(), s)
		if err != nil {
			t.Fatal(err)
		}
		if err := w.Segment(recs); err != nil {
			t.Fatal(err)
		}
		w.Close()
		return b.Bytes()
	}
	big := make([]journal.Record, 64)
	prev := journal.ZeroHash()
	for i := range big {
		big[i] = journal.Record{Seq: int64(i + 1), Session: "20260506T080000Z-forged", Kind: "note", Wall: "2026-05-06T08:00:00.000Z",
			BootID: "b", Payload: []byte(`{"note":"` + strings.Repeat("x", 900_000) + `"}`), Prev: prev}
		h := big[i].ComputeHash()
		big[i].Hash = fmt.Sprintf("%x", h)
		prev = big[i].Hash
	}
	small := big[:1:1]
	preamble := len(wire.Magic) + ed25519.PublicKeySize + 1 + len(st.ID()) + 1 // the audience is under 128 bytes: a 1-byte length
	return []bodyKind{
		{"push-unenrolled", wire.PathPush, stream(stranger, small), http.StatusForbidden, "not_enrolled"},
		{"push-garbage", wire.PathPush, stream(forger, small)[:preamble], http.StatusBadRequest, "malformed"},
		{"push-forged-max-segments", wire.PathPush, stream(forger, big), http.StatusForbidden, "refused"},
		{"marks-endless-id", wire.PathMarks, []byte(fmt.Sprintf(`{"board":"%x","sessions":["`, enrolled)), http.StatusBadRequest, "malformed"},
		{"marks-unenrolled", wire.PathMarks, []byte(fmt.Sprintf(`{"board":"%x","sessions":["`, stranger.PublicKey())), http.StatusForbidden, "not_enrolled"},
	}
}

// randomPad is oversizedBody random bytes, made once (seeded) and shared
// by every body.
var randomPad = sync.OnceValue(func() []byte {
	b := make([]byte, oversizedBody)
	rng := rand.New(rand.NewPCG(5, 6))
	for i := 0; i < len(b); i += 8 {
		v := rng.Uint64()
		for k := 0; k < 8 && i+k < len(b); k++ {
			b[i+k] = byte(v >> (8 * k))
		}
	}
	return b
})

// postConcurrently posts n bodies of kind k at once and returns their
// answers (status and refusal code; status 0 when the connection failed
// before an answer).
func postConcurrently(base string, k bodyKind, n int) ([]int, []string) {
	codes, kinds := make([]int, n), make([]string, n)
	var wg sync.WaitGroup
	for i := 0; i < n; i++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			pad := randomPad()[:oversizedBody-len(k.prefix)]
			resp, err := http.Post(base+k.path, wire.ContentType, io.MultiReader(bytes.NewReader(k.prefix), bytes.NewReader(pad)))
			if err != nil {
				return
			}
			defer resp.Body.Close()
			var r wire.Refusal
			json.NewDecoder(resp.Body).Decode(&r)
			codes[i], kinds[i] = resp.StatusCode, r.Error
		}()
	}
	wg.Wait()
	return codes, kinds
}

// memoryBound is what the receiver may hold for its DefaultConcurrent
// requests (issue 14 item 5): per request three decoded segments (one
// read, one waiting, one being stored) of at most wire.MaxSegmentBytes,
// and 8 MiB for buffers and the marks decoder, plus 16 MiB for the test's
// own clients and the garbage a collection cycle lets pile up.
const memoryBound = DefaultConcurrent*(3*wire.MaxSegmentBytes+8<<20) + 16<<20

// TestReceiverMemoryBounded posts 8 oversized bodies of each kind at once
// and checks that the receiver's peak Go heap stays under memoryBound,
// that each is refused for what it is, and that nothing was stored.
func TestReceiverMemoryBounded(t *testing.T) {
	if testing.Short() {
		t.Skip("posts 5 × 8 bodies of 60 MB")
	}
	ctx := context.Background()
	seed := make([]byte, 32)
	seed[0] = 97
	owner := keySigner{ed25519.NewKeyFromSeed(seed)}
	st := workstation(t, "sqlite", owner.PublicKey())
	srv := serve(t, st)
	randomPad()
	for _, k := range oversizedKinds(t, st, owner.PublicKey()) {
		var codes []int
		var kinds []string
		heap, _ := peakMemory(func() { codes, kinds = postConcurrently(srv.URL, k, DefaultConcurrent) })
		t.Logf("%s: peak heap %.1f MB", k.name, float64(heap)/(1<<20))
		if heap > memoryBound {
			t.Errorf("%s: peak heap %.0f MB over the bound of %.0f MB", k.name, float64(heap)/(1<<20), float64(memoryBound)/(1<<20))
		}
		answered := 0
		for i := range codes {
			if codes[i] == 0 {
				continue // the receiver closed the connection before the client read its answer
			}
			answered++
			if codes[i] != k.status || kinds[i] != k.error {
				t.Errorf("%s: answered %d %q, want %d %q", k.name, codes[i], kinds[i], k.status, k.error)
			}
		}
		if answered == 0 {
			t.Errorf("%s: no request got an answer", k.name)
		}
	}
	if ss, _ := st.Sessions(ctx, store.Query{}); len(ss) != 0 {
		t.Errorf("refused requests stored %d sessions", len(ss))
	}
}

// BenchmarkReceiverMemory reports the receiver's peak Go heap and resident
// memory while it serves 8 oversized bodies of each kind at once, beside
// its baseline in the same run: the same bodies read into io.Discard by a
// bare handler (what the HTTP server and the clients hold by themselves).
func BenchmarkReceiverMemory(b *testing.B) {
	seed := make([]byte, 32)
	seed[0] = 97
	owner := keySigner{ed25519.NewKeyFromSeed(seed)}
	st := workstation(b, "sqlite", owner.PublicKey())
	srv := serve(b, st)
	bare := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) { io.Copy(io.Discard, r.Body) }))
	defer bare.Close()
	randomPad()
	for _, k := range oversizedKinds(b, st, owner.PublicKey()) {
		for _, target := range []struct{ name, url string }{{"receiver", srv.URL}, {"bare-copy", bare.URL}} {
			b.Run(k.name+"/"+target.name, func(b *testing.B) {
				var heap, rss uint64
				for i := 0; i < b.N; i++ {
					h, r := peakMemory(func() { postConcurrently(target.url, k, DefaultConcurrent) })
					heap, rss = max(heap, h), max(rss, r)
				}
				b.ReportMetric(float64(heap)/(1<<20), "peak-heap-MB")
				b.ReportMetric(float64(rss)/(1<<20), "peak-rss-MB")
			})
		}
	}
}
