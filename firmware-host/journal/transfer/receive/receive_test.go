package receive

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
	"kermalux/firmware-host/journal/store/storetest"
	"kermalux/firmware-host/journal/transfer/push"
	"kermalux/firmware-host/journal/transfer/wire"
)

var quiet = slog.New(slog.DiscardHandler)

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

func workstation(t testing.TB, backend string, enroll ...ed25519.PublicKey) *store.Store {
	t.Helper()
	st := storetest.New(t, backend)
	for i, k := range enroll {
		if err := st.Enroll(context.Background(), k, "board-"+string(rune('a'+i))); err != nil {
			t.Fatal(err)
		}
	}
	return st
}

func serve(t testing.TB, st *store.Store) *httptest.Server {
	srv := httptest.NewServer(Handler(st, Options{Log: quiet}))
	t.Cleanup(srv.Close)
	return srv
}

// sameRecords checks the store holds exactly the journal's records, once.
func sameRecords(t testing.TB, j *journal.Journal, st *store.Store) int {
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

func TestPushAndResume(t *testing.T) {
	storetest.Each(t, func(t *testing.T, backend string) {
		ctx := context.Background()
		dir := t.TempDir()
		j := board(t, dir, 3, 5, true)
		defer j.Close()
		st := workstation(t, backend, j.PublicKey())
		srv := serve(t, st)
		sum, err := push.Push(ctx, j, push.Options{URL: srv.URL, SegmentSize: 7})
		if err != nil {
			t.Fatal(err)
		}
		want := 2*journaltest.Records(5, true) + journaltest.Records(5, false)
		if sum.Sent != want || sum.Sessions != 3 {
			t.Errorf("summary %+v, want %d records of 3 sessions", sum, want)
		}
		sameRecords(t, j, st)
		// Nothing new: a second push sends nothing.
		if sum, err := push.Push(ctx, j, push.Options{URL: srv.URL}); err != nil || sum.Sent != 0 {
			t.Errorf("second push: %+v %v", sum, err)
		}
		// The open session goes on: only the new records are sent.
		ss, _ := j.Sessions(ctx)
		if err := journaltest.WriteSession(ctx, j, ss[2].ID, 0, true, nil); err != nil {
			t.Fatal(err)
		}
		sum, err = push.Push(ctx, j, push.Options{URL: srv.URL})
		if err != nil || sum.Sent == 0 || sum.Sessions != 1 {
			t.Errorf("third push: %+v %v", sum, err)
		}
		sameRecords(t, j, st)
		// Every stored record is proven by a signed head at or after it
		// (issue 11: proof for every record): the heads verify with the
		// board key and chain back over every record.
		for _, s := range ss {
			checkProofs(t, st, j.PublicKey(), s.ID)
		}
	})
}

// checkProofs checks that every stored record of session is proven by a
// kept signed head (provenSession).
func checkProofs(t *testing.T, st *store.Store, pub ed25519.PublicKey, session string) {
	t.Helper()
	if err := provenSession(st, pub, session); err != nil {
		t.Fatal(err)
	}
}

func TestRefusals(t *testing.T) {
	storetest.Each(t, func(t *testing.T, backend string) {
		ctx := context.Background()
		j := board(t, t.TempDir(), 1, 30, false)
		defer j.Close()
		stranger := board(t, t.TempDir(), 1, 2, false)
		defer stranger.Close()
		st := workstation(t, backend, j.PublicKey())
		srv := serve(t, st)
		// An unenrolled board is refused with 403 and a reason.
		_, err := push.Push(ctx, stranger, push.Options{URL: srv.URL})
		var re *push.RefusedError
		if !errors.As(err, &re) || re.Status != http.StatusForbidden || !strings.Contains(re.Reason, "not enrolled") {
			t.Fatalf("unenrolled board: %v", err)
		}
		// A stream signed for another store (issue 14 item 13): refused
		// from its preamble, nothing stored.
		other := workstation(t, backend, j.PublicKey())
		var body bytes.Buffer
		sw, _ := wire.NewWriter(&body, wire.KindPush, other.ID(), j)
		recs, _ := j.Records(ctx, mustSession(t, j), 0, 5)
		sw.Segment(recs)
		sw.Close()
		code, r := post(t, srv.URL+wire.PathPush, body.Bytes())
		if code != http.StatusForbidden || r.Error != "audience" {
			t.Errorf("stream for another store: %d %+v", code, r)
		}
		// The same stream is taken by the store it was meant for.
		if code, r := post(t, serve(t, other).URL+wire.PathPush, body.Bytes()); code != http.StatusOK {
			t.Errorf("stream for its own store: %d %+v", code, r)
		}
		// Replayed to it: every record is stored already (409), nothing stored twice.
		if code, r := post(t, serve(t, other).URL+wire.PathPush, body.Bytes()); code != http.StatusConflict || r.Error != "replay" {
			t.Errorf("replayed stream: %d %+v", code, r)
		}
		if n, _ := st.Sessions(ctx, store.Query{}); len(n) != 0 {
			t.Errorf("refused streams left %d sessions", len(n))
		}
		// Garbage.
		if code, _ := post(t, srv.URL+wire.PathPush, []byte(`{"format":`)); code != http.StatusBadRequest {
			t.Errorf("malformed body: %d", code)
		}
	})
}

func mustSession(t testing.TB, j *journal.Journal) string {
	ss, err := j.Sessions(context.Background())
	if err != nil || len(ss) == 0 {
		t.Fatalf("sessions: %v", err)
	}
	return ss[0].ID
}

func post(t testing.TB, url string, body []byte) (int, wire.Refusal) {
	t.Helper()
	resp, err := http.Post(url, wire.ContentType, bytes.NewReader(body))
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	var r wire.Refusal
	json.NewDecoder(resp.Body).Decode(&r)
	return resp.StatusCode, r
}

// TestWorkstationRefusesTamperedJournal pushes tampered copies of a
// journal: the workstation refuses each with 403, naming the record, and
// stores nothing of the segment.
func TestWorkstationRefusesTamperedJournal(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	j := board(t, dir, 1, 3, false)
	j.Close()
	src, _ := os.ReadFile(filepath.Join(dir, "journal.db"))
	mark, _ := os.ReadFile(journal.MarkPath(filepath.Join(dir, "journal.db")))
	for _, c := range []struct{ name, sql, want string }{
		{"edit a value", `UPDATE records SET payload = replace(payload, '21.5', '25.5') WHERE seq = 5`, "record 5: record does not match its proof: hash mismatch"},
		{"delete a record", `DELETE FROM records WHERE seq = 9`, "records 9..9 missing"},
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
			st := workstation(t, "sqlite", tj.PublicKey())
			_, err = push.Push(ctx, tj, push.Options{URL: serve(t, st).URL})
			var re *push.RefusedError
			if !errors.As(err, &re) || re.Status != http.StatusForbidden || !strings.Contains(re.Reason, c.want) {
				t.Fatalf("got %v, want 403 naming %q", err, c.want)
			}
			if n, _ := st.Sessions(ctx, store.Query{}); len(n) != 0 {
				t.Errorf("a refused segment left %d sessions in the store", len(n))
			}
		})
	}
}

// TestForkRefused: issue 14 item 6. A journal restored from an old copy,
// not longer than the store's branch, is refused with both heads named.
func TestForkRefused(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	j := board(t, dir, 1, 4, true)
	j.Close()
	old, _ := os.ReadFile(filepath.Join(dir, "journal.db"))
	oldMark, _ := os.ReadFile(journal.MarkPath(filepath.Join(dir, "journal.db")))
	j, _ = journal.Open(filepath.Join(dir, "journal.db"), journal.Options{KeyDir: filepath.Join(dir, "key"), BootID: func() string { return "b" }})
	defer j.Close()
	id := mustSession(t, j)
	journaltest.WriteSession(ctx, j, id, 3, true, nil)
	st := workstation(t, "sqlite", j.PublicKey())
	srv := serve(t, st)
	if _, err := push.Push(ctx, j, push.Options{URL: srv.URL}); err != nil {
		t.Fatal(err)
	}
	// The old copy, shorter than the store: a fork at its end.
	cp := filepath.Join(t.TempDir(), "journal.db")
	os.WriteFile(cp, old, 0o600)
	os.WriteFile(journal.MarkPath(cp), oldMark, 0o600)
	oj, err := journal.Open(cp, journal.Options{KeyDir: filepath.Join(dir, "key"), BootID: func() string { return "b" }})
	if err != nil {
		t.Fatal(err)
	}
	defer oj.Close()
	_, err = push.Push(ctx, oj, push.Options{URL: srv.URL})
	if !errors.Is(err, push.ErrFork) || !strings.Contains(err.Error(), "the journal ends at record") {
		t.Fatalf("shorter old copy: %v", err)
	}
	// The old copy grown by other records to the store's length: same
	// length, another head at the mark.
	high, _ := st.Marks(ctx, j.BoardKey(), []string{id})
	for s, _ := oj.Sessions(ctx); s[0].Last < high[id].Seq; s, _ = oj.Sessions(ctx) {
		oj.Append(ctx, id, "event", map[string]string{"name": "other branch"})
	}
	_, err = push.Push(ctx, oj, push.Options{URL: srv.URL})
	if !errors.Is(err, push.ErrFork) || !strings.Contains(err.Error(), "the store's head is "+high[id].Head[:12]) {
		t.Fatalf("same-length fork: %v", err)
	}
	sameRecords(t, j, st)
}

// cutProxy forwards TCP connections to backend, cutting some of them at a
// random byte in either direction, and throttling both directions to
// bytesPerSec when it is positive.
type cutProxy struct {
	ln          net.Listener
	backend     string
	mu          sync.Mutex
	rng         *rand.Rand
	cutEvery    int // 1 in cutEvery connections is cut (0: none)
	cutAt       int64
	cuts        int
	accepted    int
	bytesPerSec int
}

func newCutProxy(t testing.TB, backend string, seed uint64, cutEvery int, cutAt int64, bytesPerSec int) *cutProxy {
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	p := &cutProxy{ln: ln, backend: backend, rng: rand.New(rand.NewPCG(seed, 7)), cutEvery: cutEvery, cutAt: cutAt, bytesPerSec: bytesPerSec}
	go p.serve()
	t.Cleanup(func() { ln.Close() })
	return p
}

func (p *cutProxy) URL() string { return "http://" + p.ln.Addr().String() }

func (p *cutProxy) serve() {
	for {
		c, err := p.ln.Accept()
		if err != nil {
			return
		}
		p.mu.Lock()
		up, down := int64(-1), int64(-1)
		p.accepted++
		// The first connections are always cut, later ones at random.
		if p.cutEvery > 0 && (p.accepted <= 4 || p.rng.IntN(p.cutEvery) == 0) {
			if p.rng.IntN(2) == 0 {
				up = 1 + p.rng.Int64N(p.cutAt) // mid-request, often mid-stream
			} else {
				down = p.rng.Int64N(100) // the answer lost after the store committed
			}
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
				var r io.Reader = src
				if limit >= 0 {
					r = io.LimitReader(src, limit)
				}
				if p.bytesPerSec > 0 {
					r = &throttled{r: r, rate: p.bytesPerSec, start: time.Now()}
				}
				io.Copy(dst, r)
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

// throttled reads no faster than rate bytes a second.
type throttled struct {
	r     io.Reader
	rate  int
	start time.Time
	n     int64
}

func (t *throttled) Read(b []byte) (int, error) {
	if len(b) > t.rate/20 {
		b = b[:t.rate/20]
	}
	n, err := t.r.Read(b)
	t.n += int64(n)
	if due := t.start.Add(time.Duration(float64(t.n) / float64(t.rate) * float64(time.Second))); time.Until(due) > 0 {
		time.Sleep(time.Until(due))
	}
	return n, err
}

// TestPushSurvivesCuts pushes through a proxy that cuts connections at
// random bytes; the store ends with each record exactly once.
func TestPushSurvivesCuts(t *testing.T) {
	ctx := context.Background()
	j := board(t, t.TempDir(), 4, 40, true)
	defer j.Close()
	for seed := uint64(1); seed <= 4; seed++ {
		st := workstation(t, "sqlite", j.PublicKey())
		srv := serve(t, st)
		px := newCutProxy(t, srv.Listener.Addr().String(), seed, 2, 3000, 0)
		client := &http.Client{Timeout: 5 * time.Second, Transport: &http.Transport{DisableKeepAlives: true}}
		sum, err := push.Push(ctx, j, push.Options{URL: px.URL(), Client: client, SegmentSize: 9,
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
	}
}

// TestThrottledPushResumes pushes through a link of 256 kbit/s (32,000
// bytes a second) whose first connection carrying a stream is cut part
// way: the push resumes from the store's marks and every record is stored
// once.
func TestThrottledPushResumes(t *testing.T) {
	ctx := context.Background()
	j := board(t, t.TempDir(), 2, 600, true)
	defer j.Close()
	st := workstation(t, "sqlite", j.PublicKey())
	srv := serve(t, st)
	px := newCutProxy(t, srv.Listener.Addr().String(), 1, 0, 0, 256000/8)
	cut := &onceCut{after: 6000}
	client := &http.Client{Transport: &http.Transport{DisableKeepAlives: true, DialContext: cut.dial}}
	sum, err := push.Push(ctx, j, push.Options{URL: px.URL(), Client: client, SegmentSize: 100, RetryDelay: time.Millisecond})
	if err != nil {
		t.Fatal(err)
	}
	if n := sameRecords(t, j, st); sum.Sent != int64(n) || sum.Retries == 0 || !cut.done {
		t.Errorf("push %+v; store holds %d; cut %v", sum, n, cut.done)
	}
	t.Logf("256 kbit/s: %s", sum)
}

// onceCut closes the first connection that has written more than after
// bytes (a stream, not the marks request).
type onceCut struct {
	mu    sync.Mutex
	after int
	done  bool
}

func (o *onceCut) dial(ctx context.Context, network, addr string) (net.Conn, error) {
	c, err := (&net.Dialer{}).DialContext(ctx, network, addr)
	if err != nil {
		return nil, err
	}
	o.mu.Lock()
	defer o.mu.Unlock()
	if o.done {
		return c, nil
	}
	return &cutConn{Conn: c, o: o}, nil
}

type cutConn struct {
	net.Conn
	o *onceCut
	n int
}

func (c *cutConn) Write(b []byte) (int, error) {
	c.o.mu.Lock()
	if !c.o.done && c.n+len(b) > c.o.after {
		c.o.done = true
		c.o.mu.Unlock()
		c.Conn.Close()
		return 0, errors.New("link cut (test)")
	}
	c.o.mu.Unlock()
	n, err := c.Conn.Write(b)
	c.n += n
	return n, err
}
