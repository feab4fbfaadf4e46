package transfer

import (
	"bytes"
	"context"
	"crypto/ed25519"
	"database/sql"
	"encoding/json"
	"errors"
	"io"
	"log/slog"
	"math/rand/v2"
	"net"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"kermalux/drivers/clock"
	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/journaltest"
	"kermalux/firmware-host/journal/store"
	"kermalux/procedures/entry"
)

// board makes a journal in dir with n sessions of r readings each (the
// last one unfinished when open is true).
func board(t testing.TB, dir string, n, r int, open bool) *journal.Journal {
	t.Helper()
	ctx := context.Background()
	j, err := journal.Open(filepath.Join(dir, "journal.db"), journal.Options{KeyDir: filepath.Join(dir, "key"),
		Clock: clock.NewManual(time.Date(2026, 5, 6, 8, 0, 0, 0, time.UTC)), BootID: func() string { return "b" }})
	if err != nil {
		t.Fatal(err)
	}
	for i := 0; i < n; i++ {
		id, err := j.Begin(ctx, journaltest.Session(i))
		if err != nil {
			t.Fatal(err)
		}
		if err := journaltest.WriteSession(ctx, j, id, r, !(open && i == n-1), nil); err != nil {
			t.Fatal(err)
		}
	}
	return j
}

func workstation(t testing.TB, enroll ...ed25519.PublicKey) *store.Store {
	t.Helper()
	st, err := store.Open(filepath.Join(t.TempDir(), "store.db"))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { st.Close() })
	for i, k := range enroll {
		if err := st.Enroll(context.Background(), k, "board-"+string(rune('a'+i))); err != nil {
			t.Fatal(err)
		}
	}
	return st
}

// sameRecords checks the store holds exactly the journal's records, once.
func sameRecords(t *testing.T, j *journal.Journal, st *store.Store) int {
	t.Helper()
	ctx := context.Background()
	sessions, _ := j.Sessions(ctx)
	n := 0
	for _, s := range sessions {
		want, _ := j.Records(ctx, s.ID, 0, 0)
		got, err := st.Records(ctx, s.ID, 0, 0)
		if err != nil {
			t.Fatal(err)
		}
		if len(got) != len(want) {
			t.Fatalf("session %s: store has %d records, journal %d", s.ID, len(got), len(want))
		}
		for i := range want {
			if got[i].Seq != want[i].Seq || got[i].Hash != want[i].Hash || !bytes.Equal(got[i].Payload, want[i].Payload) {
				t.Fatalf("session %s record %d differs in the store", s.ID, want[i].Seq)
			}
		}
		n += len(got)
	}
	return n
}

func TestPushAndQuery(t *testing.T) {
	ctx := context.Background()
	j := board(t, t.TempDir(), 3, 5, true)
	defer j.Close()
	st := workstation(t, j.PublicKey())
	srv := httptest.NewServer(Handler(st, quiet))
	defer srv.Close()
	sum, err := Push(ctx, j, PushOptions{URL: srv.URL, BatchSize: 7})
	if err != nil {
		t.Fatal(err)
	}
	want := 2*journaltest.Records(5, true) + journaltest.Records(5, false)
	if sum.Sent != want || sum.Sessions != 3 {
		t.Errorf("summary %+v, want %d records of 3 sessions", sum, want)
	}
	sameRecords(t, j, st)
	// Nothing new: a second push sends nothing.
	if sum, err := Push(ctx, j, PushOptions{URL: srv.URL}); err != nil || sum.Sent != 0 {
		t.Errorf("second push: %+v %v", sum, err)
	}
	// The open session grows; the next push sends only the new records.
	un, _ := j.Unfinished(ctx)
	j.Append(ctx, un[0].ID, entry.KindSessionEnd, entry.SessionEnd{Outcome: "complete"})
	if sum, err := Push(ctx, j, PushOptions{URL: srv.URL}); err != nil || sum.Sent != 1 {
		t.Errorf("incremental push: %+v %v", sum, err)
	}
	infos, err := st.Sessions(ctx, store.Query{Serial: "LX23-0101"})
	if err != nil || len(infos) != 1 || infos[0].End == nil || infos[0].BoardName != "board-a" {
		t.Fatalf("sessions by serial: %+v %v", infos, err)
	}
	hist, err := st.History(ctx, "LX23-0101")
	if err != nil || len(hist) != 2 || hist[0].Result.Quantity != "conversion_factor" || hist[0].Site != "Tollemby Rise Clinic" {
		t.Errorf("history: %+v %v", hist, err)
	}
	env, err := st.Envelopes(ctx, infos[0].ID)
	if err != nil || int64(len(env)) != journaltest.Records(5, true) || env[0].Kind != entry.KindSession {
		t.Errorf("envelopes: %d %v", len(env), err)
	}
}

func TestRefusals(t *testing.T) {
	ctx := context.Background()
	j := board(t, t.TempDir(), 1, 30, false)
	defer j.Close()
	stranger := board(t, t.TempDir(), 1, 2, false)
	defer stranger.Close()
	st := workstation(t, j.PublicKey())
	srv := httptest.NewServer(Handler(st, quiet))
	defer srv.Close()

	// An unenrolled board is refused with 403 and a reason.
	_, err := Push(ctx, stranger, PushOptions{URL: srv.URL})
	var re *RefusedError
	if !errors.As(err, &re) || re.Status != http.StatusForbidden || !strings.Contains(re.Reason, "not enrolled") {
		t.Fatalf("unenrolled board: %v", err)
	}
	sess, _ := j.Sessions(ctx)
	id := sess[0].ID
	old, _ := j.NextBatch(ctx, id, 0, 10)
	if _, err := Push(ctx, j, PushOptions{URL: srv.URL, BatchSize: 10}); err != nil {
		t.Fatal(err)
	}
	before := sameRecords(t, j, st)
	post := func(b *journal.Batch) (int, Refusal) {
		data, _ := json.Marshal(b)
		resp, err := http.Post(srv.URL+"/v1/batch", "application/json", bytes.NewReader(data))
		if err != nil {
			t.Fatal(err)
		}
		defer resp.Body.Close()
		var r Refusal
		json.NewDecoder(resp.Body).Decode(&r)
		return resp.StatusCode, r
	}
	// A replayed old batch is refused (409) and stores nothing.
	if code, r := post(old); code != http.StatusConflict || r.Error != "replay" {
		t.Errorf("replay: %d %+v", code, r)
	}
	// A batch with one value edited is refused (403), naming the record.
	edited, _ := j.NextBatch(ctx, id, 10, 5)
	edited.Records[2].Payload = json.RawMessage(bytes.Replace(edited.Records[2].Payload, []byte("0.87"), []byte("0.97"), 1))
	if code, r := post(edited); code != http.StatusForbidden || !strings.Contains(r.Reason, "record 13") || !strings.Contains(r.Reason, "hash mismatch") {
		t.Errorf("edited value: %d %+v", code, r)
	}
	// A batch with a record deleted is refused: the batch signature and the chain no longer hold.
	cut, _ := j.NextBatch(ctx, id, 10, 5)
	cut.Records = append(cut.Records[:1], cut.Records[2:]...)
	if code, r := post(cut); code != http.StatusForbidden || !strings.Contains(r.Reason, "signature") {
		t.Errorf("deleted record: %d %+v", code, r)
	}
	// Re-signed by the board after a deletion, the chain still catches it.
	j.SignBatch(cut)
	if code, r := post(cut); code != http.StatusForbidden || !strings.Contains(r.Reason, "missing") {
		t.Errorf("deleted record, re-signed: %d %+v", code, r)
	}
	// Signed by another board's key: refused.
	forged, _ := j.NextBatch(ctx, id, 0, 3)
	stranger.SignBatch(forged)
	if code, r := post(forged); code != http.StatusForbidden {
		t.Errorf("forged batch: %d %+v", code, r)
	}
	// Garbage.
	resp, _ := http.Post(srv.URL+"/v1/batch", "application/json", strings.NewReader(`{"format":`))
	if resp.StatusCode != http.StatusBadRequest {
		t.Errorf("malformed body: %d", resp.StatusCode)
	}
	resp.Body.Close()
	if after := sameRecords(t, j, st); after != before {
		t.Errorf("refused batches changed the store: %d -> %d records", before, after)
	}
}

// cutProxy forwards TCP connections to backend and cuts some of them at a
// random byte, in either direction.
type cutProxy struct {
	ln      net.Listener
	backend string
	mu      sync.Mutex
	rng     *rand.Rand
	cuts    int
}

func newCutProxy(t *testing.T, backend string, seed uint64) *cutProxy {
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	p := &cutProxy{ln: ln, backend: backend, rng: rand.New(rand.NewPCG(seed, 7))}
	go p.serve()
	t.Cleanup(func() { ln.Close() })
	return p
}

func (p *cutProxy) serve() {
	for {
		c, err := p.ln.Accept()
		if err != nil {
			return
		}
		p.mu.Lock()
		// Half the connections are cut: at a random byte of the request
		// (often mid-body) or of the answer (after the store committed).
		up, down := int64(-1), int64(-1)
		switch p.rng.IntN(4) {
		case 0:
			up = p.rng.Int64N(6000)
			p.cuts++
		case 1:
			down = p.rng.Int64N(200)
			p.cuts++
		}
		p.mu.Unlock()
		go func() {
			b, err := net.Dial("tcp", p.backend)
			if err != nil {
				c.Close()
				return
			}
			done := make(chan struct{}, 2)
			pipe := func(dst, src net.Conn, limit int64) {
				if limit >= 0 {
					io.CopyN(dst, src, limit)
				} else {
					io.Copy(dst, src)
				}
				c.Close()
				b.Close()
				done <- struct{}{}
			}
			go pipe(b, c, up)
			go pipe(c, b, down)
			<-done
			<-done
		}()
	}
}

// TestPushSurvivesCuts pushes through a proxy that cuts connections at
// random bytes; the store ends with each record exactly once.
func TestPushSurvivesCuts(t *testing.T) {
	ctx := context.Background()
	j := board(t, t.TempDir(), 4, 25, true)
	defer j.Close()
	for seed := uint64(1); seed <= 4; seed++ {
		st := workstation(t, j.PublicKey())
		srv := httptest.NewServer(Handler(st, quiet))
		px := newCutProxy(t, srv.Listener.Addr().String(), seed)
		client := &http.Client{Timeout: 5 * time.Second, Transport: &http.Transport{DisableKeepAlives: true}}
		sum, err := Push(ctx, j, PushOptions{URL: "http://" + px.ln.Addr().String(), Client: client, BatchSize: 9,
			Retries: 40, RetryDelay: time.Millisecond, Clock: clock.NewManual(time.Now())})
		if err != nil {
			t.Fatalf("seed %d: %v (%+v)", seed, err, sum)
		}
		n := sameRecords(t, j, st)
		if sum.Sent != int64(n) {
			t.Errorf("seed %d: push counted %d records, store holds %d", seed, sum.Sent, n)
		}
		px.mu.Lock()
		cuts := px.cuts
		px.mu.Unlock()
		if cuts == 0 || sum.Retries == 0 {
			t.Errorf("seed %d: no connection was cut (%d cuts, %d retries)", seed, cuts, sum.Retries)
		}
		srv.Close()
	}
}

func writeBundleFile(t *testing.T, j *journal.Journal, batch int) []byte {
	t.Helper()
	var buf bytes.Buffer
	if _, err := WriteBundle(context.Background(), j, &buf, batch, nil); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

func TestBundleImport(t *testing.T) {
	ctx := context.Background()
	j := board(t, t.TempDir(), 2, 4, true)
	defer j.Close()
	data := writeBundleFile(t, j, 6)
	st := workstation(t, j.PublicKey())
	b, err := ReadBundle(bytes.NewReader(data), "usb.bundle")
	if err != nil {
		t.Fatal(err)
	}
	sum, err := Import(ctx, st, b, "usb.bundle", nil)
	want := journaltest.Records(4, true) + journaltest.Records(4, false)
	if err != nil || int64(sum.Stored) != want {
		t.Fatalf("import: %+v %v, want %d stored", sum, err, want)
	}
	// Importing again stores nothing new.
	if sum, err := Import(ctx, st, b, "usb.bundle", nil); err != nil || sum.Stored != 0 || int64(sum.Duplicates) != want {
		t.Errorf("second import: %+v %v", sum, err)
	}
	sameRecords(t, j, st)
	// An unenrolled board's bundle is refused.
	if _, err := Import(ctx, workstation(t), b, "usb.bundle", nil); !errors.Is(err, store.ErrNotEnrolled) || !strings.Contains(err.Error(), "usb.bundle line 2") {
		t.Errorf("unenrolled import: %v", err)
	}
}

func TestBundleTampering(t *testing.T) {
	j := board(t, t.TempDir(), 2, 4, false)
	defer j.Close()
	data := writeBundleFile(t, j, 6)
	lines := bytes.Split(bytes.TrimSuffix(data, []byte("\n")), []byte("\n"))
	join := func(ls [][]byte) []byte { return append(bytes.Join(ls, []byte("\n")), '\n') }
	edit := func(line int, f func([]byte) []byte) []byte {
		ls := make([][]byte, len(lines))
		copy(ls, lines)
		ls[line] = f(append([]byte(nil), lines[line]...))
		return join(ls)
	}
	without := func(line int) []byte {
		var ls [][]byte
		ls = append(ls, lines[:line]...)
		return join(append(ls, lines[line+1:]...))
	}
	// Deleting one record object from batch line 3 (JSON kept valid).
	delRecord := func(l []byte) []byte {
		var b journal.Batch
		json.Unmarshal(l, &b)
		b.Records = append(b.Records[:2], b.Records[3:]...)
		out, _ := json.Marshal(b)
		return out
	}
	cases := []struct {
		name string
		data []byte
		want string
	}{
		{"flip a byte in a reading", edit(2, func(l []byte) []byte {
			i := bytes.Index(l, []byte("MEAS 0.87"))
			l[i+8] ^= 1
			return l
		}), "line 3: record"},
		{"edit a value", edit(1, func(l []byte) []byte { return bytes.Replace(l, []byte(`"value":21.5`), []byte(`"value":25.5`), 1) }), "hash mismatch"},
		{"delete a record", edit(3, delRecord), "line 4: bad signature"},
		{"delete a batch", without(2), "batches removed"},
		{"truncate the closing line", data[:len(data)-40], "truncated"},
		{"truncate mid-batch", data[:len(data)/2], "truncated"},
		{"change the header", edit(0, func(l []byte) []byte { return bytes.Replace(l, []byte(`"created":"2`), []byte(`"created":"1`), 1) }), "bundle signature"},
		{"swap two batches", func() []byte {
			ls := make([][]byte, len(lines))
			copy(ls, lines)
			ls[1], ls[2] = ls[2], ls[1]
			return join(ls)
		}(), "bundle signature"},
		{"not a bundle", []byte("hello\n"), "line 1: not a kermalux bundle"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := ReadBundle(bytes.NewReader(c.data), "usb.bundle")
			if err == nil || !strings.Contains(err.Error(), c.want) || !strings.Contains(err.Error(), "usb.bundle") {
				t.Errorf("got %v, want an error naming the file and %q", err, c.want)
			}
		})
	}
	if _, err := ReadBundle(bytes.NewReader(data), "usb.bundle"); err != nil {
		t.Errorf("untouched bundle refused: %v", err)
	}
}

var quiet = slog.New(slog.DiscardHandler)

// TestWorkstationRefusesTamperedJournal pushes tampered copies of a
// journal: the workstation refuses each with 403, naming the record.
func TestWorkstationRefusesTamperedJournal(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	j := board(t, dir, 1, 3, false)
	j.Close()
	src, _ := os.ReadFile(filepath.Join(dir, "journal.db"))
	mark, _ := os.ReadFile(journal.MarkPath(filepath.Join(dir, "journal.db")))
	for _, c := range []struct{ name, sql, want string }{
		{"edit a value", `UPDATE records SET payload = replace(payload, '21.5', '25.5') WHERE seq = 5`, "record 5"},
		{"delete a record", `DELETE FROM records WHERE seq = 9`, "missing"},
		// The first hex digit is changed, whatever it was (a fixed '0' would
		// leave one hash in sixteen untouched).
		{"flip a hash byte", `UPDATE records SET hash = (CASE substr(hash, 1, 1) WHEN '0' THEN '1' ELSE '0' END) || substr(hash, 2) WHERE seq = 3`, "record 3"},
	} {
		t.Run(c.name, func(t *testing.T) {
			cp := filepath.Join(t.TempDir(), "copy.db")
			os.WriteFile(cp, src, 0o600)
			os.WriteFile(journal.MarkPath(cp), mark, 0o600)
			db, err := sql.Open("sqlite", cp)
			if err != nil {
				t.Fatal(err)
			}
			if _, err := db.Exec(c.sql); err != nil {
				t.Fatal(err)
			}
			db.Close()
			tj, err := journal.Open(cp, journal.Options{KeyDir: filepath.Join(dir, "key")})
			if err != nil {
				t.Fatal(err)
			}
			defer tj.Close()
			st := workstation(t, tj.PublicKey())
			srv := httptest.NewServer(Handler(st, quiet))
			defer srv.Close()
			_, err = Push(ctx, tj, PushOptions{URL: srv.URL})
			var re *RefusedError
			if !errors.As(err, &re) || re.Status != http.StatusForbidden || !strings.Contains(re.Reason, c.want) {
				t.Fatalf("got %v, want 403 naming %q", err, c.want)
			}
			if n, _ := st.Sessions(ctx, store.Query{}); len(n) != 0 {
				t.Errorf("a refused batch left %d sessions in the store", len(n))
			}
		})
	}
}
