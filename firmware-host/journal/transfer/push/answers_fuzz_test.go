package push

import (
	"bytes"
	"context"
	"crypto/ed25519"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/transfer/wire"
	"kermalux/procedures/entry"
)

// memSource is a board journal in memory: two sessions of hash-chained
// records (one ended, one not), signed by a fixed key nobody else holds.
type memSource struct {
	priv     ed25519.PrivateKey
	sessions []journal.SessionSummary
	recs     map[string][]journal.Record
}

func newMemSource() *memSource {
	seed := make([]byte, ed25519.SeedSize)
	copy(seed, "push answers fuzz board key 0001")
	s := &memSource{priv: ed25519.NewKeyFromSeed(seed), recs: map[string][]journal.Record{}}
	start := time.Date(2026, 5, 6, 8, 0, 0, 0, time.UTC)
	for i, n := range []int{3, 2} {
		id := fmt.Sprintf("%s-s%d", start.Format("20060102T150405Z"), i)
		prev := journal.ZeroHash()
		for seq := 1; seq <= n; seq++ {
			kind, v := entry.KindReading, any(entry.Reading{Meter: "dosimeter", Value: 0.87, Unit: "µGy/s", Status: "ok"})
			if seq == 1 {
				kind, v = entry.KindSession, any(entry.Session{ID: id, Procedure: "yearly", Started: start})
			}
			body, _ := json.Marshal(v)
			r := journal.Record{Seq: int64(seq), Session: id, Kind: kind, Wall: start.Add(time.Duration(seq) * time.Second).Format(journal.WallFormat),
				Mono: int64(seq) * int64(time.Second), BootID: "b1", Payload: body, Prev: prev}
			h := r.ComputeHash()
			r.Hash = hex.EncodeToString(h[:])
			r.Sig = hex.EncodeToString(ed25519.Sign(s.priv, h[:]))
			prev = r.Hash
			s.recs[id] = append(s.recs[id], r)
		}
		s.sessions = append(s.sessions, journal.SessionSummary{ID: id, Last: int64(n)})
	}
	return s
}

func (s *memSource) BoardKey() string             { return hex.EncodeToString(s.PublicKey()) }
func (s *memSource) PublicKey() ed25519.PublicKey { return s.priv.Public().(ed25519.PublicKey) }
func (s *memSource) Sign(msg []byte) []byte       { return ed25519.Sign(s.priv, msg) }
func (s *memSource) total() (n int64)             { return s.sessions[0].Last + s.sessions[1].Last }
func (s *memSource) head(i int, seq int64) string { return s.recs[s.sessions[i].ID][seq-1].Hash }
func (s *memSource) id(i int) string              { return s.sessions[i].ID }
func (s *memSource) last(i int) int64             { return s.sessions[i].Last }
func (s *memSource) Sessions(context.Context) ([]journal.SessionSummary, error) {
	return s.sessions, nil
}

func (s *memSource) Records(_ context.Context, session string, after int64, limit int) ([]journal.Record, error) {
	var out []journal.Record
	for _, r := range s.recs[session] {
		if r.Seq > after && (limit <= 0 || len(out) < limit) {
			out = append(out, r)
		}
	}
	return out, nil
}

// noWait is a clock whose waits between retries take no time.
type noWait struct{}

func (noWait) Now() time.Time                     { return time.Date(2026, 5, 6, 9, 0, 0, 0, time.UTC) }
func (noWait) Mono() time.Duration                { return 0 }
func (noWait) Real(d time.Duration) time.Duration { return d }
func (noWait) Sleep(ctx context.Context, _ time.Duration) error {
	return ctx.Err()
}

// answers is a workstation in memory that gives the same answer to every
// request of a path: status and body for /v2/marks and for /v2/push (whose
// stream it reads to the end first, as a receiver does).
type answers struct {
	marksStatus, pushStatus int
	marks, push             []byte
	requests                atomic.Int64
}

// maxRequests bounds the requests of one push against answers: a board
// that keeps asking a workstation whose answers make no progress would
// send its journal for ever.
const maxRequests = 64

var errRunaway = errors.New("runaway push: more requests than any answer justifies")

func (a *answers) RoundTrip(req *http.Request) (*http.Response, error) {
	if a.requests.Add(1) > maxRequests {
		return nil, errRunaway
	}
	status, body := a.marksStatus, a.marks
	if strings.HasSuffix(req.URL.Path, wire.PathPush) {
		status, body = a.pushStatus, a.push
	}
	if req.Body != nil {
		// Read to the end, as the receiver does before it answers a
		// stream it stored: answered unread, the board's stream would
		// fail at its next write, and the answer would not count.
		io.Copy(io.Discard, req.Body)
		req.Body.Close()
	}
	return &http.Response{StatusCode: status, Status: http.StatusText(status), Proto: "HTTP/1.1", ProtoMajor: 1, ProtoMinor: 1,
		Header: http.Header{"Content-Type": {"application/json"}}, Body: io.NopCloser(bytes.NewReader(body)), Request: req}, nil
}

// statuses are the answers' status codes a fuzz input picks from: the
// receiver's own (PROTOCOL.md) and a proxy's.
var statuses = []int{200, 400, 403, 404, 409, 413, 500, 502, 503}

// pushAnswers pushes src against one fuzzed pair of answers and checks
// what the board makes of them: it never panics, it stops after a bounded
// number of requests (a 200 that stores nothing is no progress), it never
// counts more records sent than its journal holds, and an error says
// something.
func pushAnswers(t *testing.T, src *memSource, codes uint16, marks, pushed []byte) {
	a := &answers{marksStatus: statuses[int(codes&0xff)%len(statuses)], pushStatus: statuses[int(codes>>8)%len(statuses)], marks: marks, push: pushed}
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	sum, err := Push(ctx, src, Options{URL: "http://workstation.invalid:8470", Client: &http.Client{Transport: a},
		SegmentSize: 2, Retries: 3, RetryDelay: time.Millisecond, Clock: noWait{}})
	if errors.Is(err, errRunaway) || a.requests.Load() > maxRequests {
		t.Fatalf("push kept sending: %d requests (marks %d %q, push %d %q): %v", a.requests.Load(), a.marksStatus, marks, a.pushStatus, pushed, err)
	}
	if ctx.Err() != nil {
		t.Fatalf("push did not end within 5 s (marks %d %q, push %d %q)", a.marksStatus, marks, a.pushStatus, pushed)
	}
	if sum.Sent < 0 || sum.Sent > src.total() {
		t.Fatalf("push counts %d records sent, the journal holds %d (marks %d %q, push %d %q, err %v)", sum.Sent, src.total(), a.marksStatus, marks, a.pushStatus, pushed, err)
	}
	if err != nil && err.Error() == "" {
		t.Fatal("an error with no words")
	}
}

// answerSeeds are the receiver's real answers to this journal (nothing
// stored yet, part stored, all stored) and the refusals PROTOCOL.md
// lists, with what a proxy or a broken workstation could send instead.
func answerSeeds(src *memSource) (out []struct {
	codes         uint16
	marks, pushed []byte
}) {
	j := func(v any) []byte { b, _ := json.Marshal(v); return b }
	a, b := src.id(0), src.id(1)
	none := j(wire.MarksResponse{Store: "st-0001", Marks: map[string]wire.Mark{}})
	part := j(wire.MarksResponse{Store: "st-0001", Marks: map[string]wire.Mark{a: {Seq: 1, Head: src.head(0, 1)}}})
	all := j(wire.MarksResponse{Store: "st-0001", Marks: map[string]wire.Mark{a: {Seq: src.last(0), Head: src.head(0, src.last(0))}, b: {Seq: src.last(1), Head: src.head(1, src.last(1))}}})
	stored := j(wire.PushResponse{Stored: src.total(), High: map[string]int64{a: src.last(0), b: src.last(1)}})
	add := func(mc, pc int, marks, pushed []byte) {
		var mi, pi int
		for i, s := range statuses {
			if s == mc {
				mi = i
			}
			if s == pc {
				pi = i
			}
		}
		out = append(out, struct {
			codes         uint16
			marks, pushed []byte
		}{uint16(pi)<<8 | uint16(mi), marks, pushed})
	}
	add(200, 200, none, stored)
	add(200, 200, part, stored)
	add(200, 200, all, []byte(`{"stored":0,"duplicates":0,"high":{}}`))
	add(200, 200, none, []byte(`{}`))
	add(200, 200, none, j(wire.PushResponse{Stored: 9, High: map[string]int64{a: 99, "another-session": 7}}))
	add(200, 200, j(wire.MarksResponse{Store: "st-0001", Marks: map[string]wire.Mark{a: {Seq: -3, Head: src.head(0, 1)}}}), stored)
	add(200, 200, j(wire.MarksResponse{Store: "st-0001", Marks: map[string]wire.Mark{a: {Seq: 2, Head: strings.Repeat("0", 64)}}}), stored)
	add(200, 409, none, j(wire.Refusal{Error: "gap", Reason: "session starts at record 3, the store ends at 1"}))
	add(200, 403, none, j(wire.Refusal{Error: "not_enrolled", Reason: "board not enrolled"}))
	add(200, 503, none, j(wire.Refusal{Error: "busy", Reason: "8 requests at once"}))
	add(200, 413, none, j(wire.Refusal{Error: "too_large", Reason: "body over 64 MiB"}))
	add(502, 502, []byte("<html>Bad Gateway</html>"), []byte("<html>Bad Gateway</html>"))
	add(200, 200, []byte(`{"store":"st-0001","marks":{"`+a+`":{"seq":1e999}}}`), []byte("null"))
	return out
}

// FuzzPushAnswers feeds the board's push every answer a workstation (or
// whatever stands between) could give to its two requests.
func FuzzPushAnswers(f *testing.F) {
	src := newMemSource()
	for _, s := range answerSeeds(src) {
		f.Add(s.codes, s.marks, s.pushed)
	}
	f.Fuzz(func(t *testing.T, codes uint16, marks, pushed []byte) {
		pushAnswers(t, src, codes, marks, pushed)
	})
}

// A workstation whose marks fall back below what its push answer
// acknowledged (it stores record 2 of a session, then says it holds only
// record 1, every time) is refused as having lost records, after a few
// requests: the push went round until the runaway bound before (found by
// FuzzPushAnswers, its corpus keeps the input).
func TestPushRefusesStoreGoingBack(t *testing.T) {
	src := newMemSource()
	a := src.id(0)
	marks, _ := json.Marshal(wire.MarksResponse{Store: "st-0001", Marks: map[string]wire.Mark{a: {Seq: 1, Head: src.head(0, 1)}}})
	pushed, _ := json.Marshal(wire.PushResponse{Stored: 1, High: map[string]int64{a: 2}})
	ans := &answers{marksStatus: 200, pushStatus: 200, marks: marks, push: pushed}
	_, err := Push(context.Background(), src, Options{URL: "http://workstation.invalid:8470", Client: &http.Client{Transport: ans},
		SegmentSize: 2, Retries: 3, RetryDelay: time.Millisecond, Clock: noWait{}})
	if !errors.Is(err, ErrStoreLost) || !strings.Contains(err.Error(), "acknowledged record 2 of session "+a) {
		t.Fatalf("push error %v, want the store named as having lost record 2 of %s", err, a)
	}
	if n := ans.requests.Load(); n > 6 {
		t.Errorf("%d requests before the refusal, want a few", n)
	}
}
