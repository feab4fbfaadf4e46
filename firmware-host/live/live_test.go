package live

import (
	"bufio"
	"context"
	"encoding/json"
	"errors"
	"io"
	"log/slog"
	"net"
	"net/http"
	"net/http/cookiejar"
	"net/http/httptest"
	"net/url"
	"strconv"
	"strings"
	"testing"
	"time"

	"kermalux/drivers/clock"
	"kermalux/firmware-host/demo"
	"kermalux/procedures/engine"
	"kermalux/procedures/entry"
)

// rig is a live view over an in-memory journal.
type rig struct {
	hub *Hub
	mem *demo.MemJournal
	j   *Journal
	srv *Server
	ts  *httptest.Server
	clk *clock.Manual
}

func newRig(t *testing.T, buf int) *rig {
	t.Helper()
	clk := clock.NewManual(time.Date(2026, 9, 1, 9, 0, 0, 0, time.UTC))
	r := &rig{hub: NewHub(buf), clk: clk, mem: demo.NewMemJournal(clk)}
	r.j = NewJournal(r.mem, r.hub, clk)
	var err error
	r.srv, err = NewServer(r.hub, r.j, Options{Log: quiet, Code: "417209", Token: "feedc0ffee", Procedure: engine.Procedure{Name: "p", Title: "Test procedure",
		Steps: []engine.Step{{ID: "a", Kind: engine.Prepare, Text: "First. More."}, {ID: "b", Kind: engine.Measure, Text: "Second step"}}}})
	if err != nil {
		t.Fatal(err)
	}
	r.ts = httptest.NewServer(r.srv)
	t.Cleanup(r.ts.Close)
	return r
}

var quiet = slog.New(slog.NewTextHandler(io.Discard, nil))

// client returns an HTTP client with a cookie jar that does not follow redirects.
func client(t testing.TB) *http.Client {
	jar, _ := cookiejar.New(nil)
	return &http.Client{Jar: jar, Timeout: 20 * time.Second, CheckRedirect: func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse }}
}

func get(t *testing.T, c *http.Client, u string) (*http.Response, string) {
	t.Helper()
	resp, err := c.Get(u)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	return resp, string(b)
}

func (r *rig) paired(t *testing.T) *http.Client {
	c := client(t)
	resp, _ := get(t, c, r.ts.URL+"/pair?code="+r.srv.Code())
	if resp.StatusCode != http.StatusSeeOther {
		t.Fatalf("pairing with the right code: %s", resp.Status)
	}
	return c
}

type sse struct {
	id   int64
	kind string
	seq  int64
	data string
}

// stream reads server-sent events from resp into a channel.
func stream(resp *http.Response) <-chan sse {
	ch := make(chan sse, 1024)
	go func() {
		defer close(ch)
		sc := bufio.NewScanner(resp.Body)
		sc.Buffer(make([]byte, 1<<20), 1<<20)
		var ev sse
		for sc.Scan() {
			line := sc.Text()
			switch {
			case strings.HasPrefix(line, "id: "):
				ev.id, _ = strconv.ParseInt(line[4:], 10, 64)
			case strings.HasPrefix(line, "data: "):
				ev.data = line[6:]
				var w struct {
					Kind string `json:"kind"`
					Seq  int64  `json:"seq"`
				}
				_ = json.Unmarshal([]byte(ev.data), &w)
				ev.kind, ev.seq = w.Kind, w.Seq
			case line == "":
				if ev.data != "" {
					ch <- ev
				}
				ev = sse{}
			}
		}
	}()
	return ch
}

func next(t *testing.T, ch <-chan sse) sse {
	t.Helper()
	select {
	case ev, ok := <-ch:
		if !ok {
			t.Fatal("stream ended")
		}
		return ev
	case <-time.After(10 * time.Second):
		t.Fatal("no event within 10 s")
	}
	return sse{}
}

// The page is read-only: every method but GET is refused on every path,
// paired or not, before anything else is looked at.
func TestEveryNonGETRefused(t *testing.T) {
	t.Parallel()
	r := newRig(t, 0)
	c := r.paired(t)
	for _, m := range []string{http.MethodPost, http.MethodPut, http.MethodPatch, http.MethodDelete, http.MethodHead, http.MethodOptions, http.MethodTrace, "START", "BEAM"} {
		for _, p := range []string{"/", "/events", "/pair?code=" + r.srv.Code(), "/app.js", "/step/next", "/beam"} {
			req, _ := http.NewRequest(m, r.ts.URL+p, strings.NewReader("go=1"))
			resp, err := c.Do(req)
			if err != nil {
				t.Fatal(err)
			}
			resp.Body.Close()
			if resp.StatusCode != http.StatusMethodNotAllowed || resp.Header.Get("Allow") != "GET" {
				t.Errorf("%s %s: %s (Allow %q), want 405 with Allow: GET", m, p, resp.Status, resp.Header.Get("Allow"))
			}
		}
	}
}

// An unpaired client gets nothing of the session: no page, no script, no
// events; wrong codes and tokens change nothing; too many wrong codes lock
// pairing by code, while the printed token still pairs.
func TestUnpairedClientRefused(t *testing.T) {
	t.Parallel()
	r := newRig(t, 0)
	ctx := context.Background()
	id, _ := r.j.Begin(ctx, entry.Session{Site: "Ostrelby General", Room: "Room 2"})
	_, _ = r.j.Append(ctx, id, entry.KindStep, entry.Step{Index: 1, Of: 2, ID: "a", State: entry.StepStarted})
	c := client(t)
	for _, p := range []string{"/", "/events", "/app.js", "/?token=wrong", "/pair?code=000000", "/pair"} {
		resp, body := get(t, c, r.ts.URL+p)
		if resp.StatusCode != http.StatusUnauthorized {
			t.Errorf("unpaired GET %s: %s, want 401", p, resp.Status)
		}
		if strings.Contains(body, "Ostrelby") || strings.Contains(body, "data:") || strings.Contains(body, "EventSource") {
			t.Errorf("unpaired GET %s leaked the session: %q", p, body)
		}
		if len(resp.Cookies()) > 0 {
			t.Errorf("unpaired GET %s set a cookie", p)
		}
	}
	// A made-up cookie is no pairing.
	u, _ := url.Parse(r.ts.URL)
	c.Jar.SetCookies(u, []*http.Cookie{{Name: cookieName, Value: strings.Repeat("ab", 32)}})
	if resp, _ := get(t, c, r.ts.URL+"/events"); resp.StatusCode != http.StatusUnauthorized {
		t.Errorf("forged cookie: %s", resp.Status)
	}
	// Lock-out after MaxFailures wrong attempts (10; 3 made above).
	for i := 0; i < 10; i++ {
		get(t, c, r.ts.URL+"/pair?code=12345"+strconv.Itoa(i%10))
	}
	if resp, _ := get(t, c, r.ts.URL+"/pair?code="+r.srv.Code()); resp.StatusCode != http.StatusForbidden {
		t.Errorf("right code after 10 wrong ones: %s, want 403", resp.Status)
	}
	resp, _ := get(t, c, r.ts.URL+"/?token="+r.srv.Token())
	if resp.StatusCode != http.StatusSeeOther || resp.Header.Get("Location") != "/" {
		t.Fatalf("token pairing: %s to %q", resp.Status, resp.Header.Get("Location"))
	}
	if resp, body := get(t, c, r.ts.URL+"/"); resp.StatusCode != http.StatusOK || !strings.Contains(body, "app.js") {
		t.Errorf("paired page: %s", resp.Status)
	}
}

// A paired browser gets the hello, the journal so far, then records as
// they are appended; one that rejoins with Last-Event-ID gets only what it
// missed, from the journal.
func TestStreamAndCatchUp(t *testing.T) {
	t.Parallel()
	r := newRig(t, 0)
	ctx := context.Background()
	id, _ := r.j.Begin(ctx, entry.Session{Site: "Ostrelby General"})
	_, _ = r.j.Append(ctx, id, entry.KindStep, entry.Step{Index: 1, Of: 2, ID: "a", State: entry.StepStarted})
	c := r.paired(t)
	ctx1, cancel1 := context.WithCancel(ctx)
	req, _ := http.NewRequestWithContext(ctx1, http.MethodGet, r.ts.URL+"/events", nil)
	resp, err := c.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	if ct := resp.Header.Get("Content-Type"); ct != "text/event-stream" {
		t.Fatalf("content type %q", ct)
	}
	ch := stream(resp)
	if ev := next(t, ch); ev.kind != "live_hello" || !strings.Contains(ev.data, `"Second step"`) || !strings.Contains(ev.data, `"First"`) {
		t.Fatalf("first event %+v, want the hello with the steps", ev)
	}
	if ev := next(t, ch); ev.kind != "session" || ev.id != 1 {
		t.Fatalf("replay: %+v", ev)
	}
	if ev := next(t, ch); ev.kind != "step" || ev.id != 2 {
		t.Fatalf("replay: %+v", ev)
	}
	seq, _ := r.j.Append(ctx, id, entry.KindReading, entry.Reading{Meter: "dosimeter", Value: 0.45, Unit: "µGy/s"})
	if ev := next(t, ch); ev.kind != "reading" || ev.id != seq || !strings.Contains(ev.data, `"value":0.45`) {
		t.Fatalf("live: %+v", ev)
	}
	cancel1()
	resp.Body.Close()
	// Missed while away.
	for i := 0; i < 3; i++ {
		_, _ = r.j.Append(ctx, id, entry.KindReading, entry.Reading{Meter: "photometer", Value: float64(60 + i)})
	}
	req, _ = http.NewRequest(http.MethodGet, r.ts.URL+"/events", nil)
	req.Header.Set("Last-Event-ID", strconv.FormatInt(seq, 10))
	resp, err = c.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	ch = stream(resp)
	if ev := next(t, ch); ev.kind != "live_hello" || !strings.Contains(ev.data, `"after":`+strconv.FormatInt(seq, 10)) {
		t.Fatalf("hello on rejoin: %+v", ev)
	}
	for i := 0; i < 3; i++ {
		ev := next(t, ch)
		if ev.kind != "reading" || ev.id != seq+1+int64(i) {
			t.Fatalf("catch-up %d: %+v, want reading %d", i, ev, seq+1+int64(i))
		}
	}
}

// A subscriber that does not keep up is dropped; the publisher never waits.
func TestSlowSubscriberDropped(t *testing.T) {
	t.Parallel()
	h := NewHub(4)
	slow := h.Subscribe()
	fast := h.Subscribe()
	got := 0
	for i := 1; i <= 10; i++ {
		h.Publish(Event{Seq: int64(i)}) // would block forever if Publish waited
		for len(fast.C()) > 0 {
			<-fast.C()
			got++
		}
	}
	if _, open := <-drain(slow.C()); open {
		t.Error("the slow subscriber's channel is still open")
	}
	if h.Dropped() != 1 || got != 10 {
		t.Errorf("dropped %d (want 1), fast subscriber got %d of 10", h.Dropped(), got)
	}
	fast.Close()
	if h.Watching() {
		t.Error("still watching with no subscriber")
	}
}

func drain(c <-chan Event) <-chan Event {
	for range c {
	}
	out := make(chan Event)
	close(out)
	return out
}

// With nobody watching, the tee adds nothing to an append: the same
// allocations as the journal alone (testing.AllocsPerRun is exact, not timed).
func TestNobodyWatchingCostsNothing(t *testing.T) {
	clk := clock.NewManual(time.Time{})
	ctx := context.Background()
	rd := entry.Reading{Meter: "dosimeter", Quantity: "air_kerma_rate", Value: 0.45, Unit: "µGy/s", Corrections: []entry.Correction{{Name: "k_tp", Factor: 1.01}}}
	// Both called through the interface, as the engine calls its journal.
	var bare engine.Journal = &counting{}
	var tee engine.Journal = NewJournal(&counting{}, NewHub(0), clk)
	a := testing.AllocsPerRun(1000, func() { appendVia(ctx, bare, rd) })
	b := testing.AllocsPerRun(1000, func() { appendVia(ctx, tee, rd) })
	if b > a {
		t.Errorf("an append through the tee allocates %.0f times, the journal alone %.0f", b, a)
	}
}

// appendVia appends through the interface, as the engine does.
//
//go:noinline
func appendVia(ctx context.Context, j engine.Journal, rd entry.Reading) {
	_, _ = j.Append(ctx, "s", entry.KindReading, rd)
}

// counting is a journal that keeps nothing.
type counting struct{ n int64 }

func (c *counting) Begin(context.Context, entry.Session) (string, error) { return "s", nil }
func (c *counting) Append(_ context.Context, _ string, _ entry.Kind, p any) (int64, error) {
	c.n++
	return c.n, nil
}
func (c *counting) AppendAll(_ context.Context, _ string, items []entry.Item) (int64, error) {
	c.n += int64(len(items))
	return c.n, nil
}
func (c *counting) Envelopes(context.Context, string) ([]entry.Envelope, error) { return nil, nil }
func (c *counting) VerifySession(context.Context, string) error                 { return nil }

// TestListenBadAddressKeepsCause: an address that is not HOST:PORT is
// ErrBadAddress, and the parser's own error stays reachable
// (net.SplitHostPort's *net.AddrError), not flattened into text.
func TestListenBadAddressKeepsCause(t *testing.T) {
	_, err := Listen("8471", Options{Log: quiet})
	var addrErr *net.AddrError
	if !errors.Is(err, ErrBadAddress) || !errors.As(err, &addrErr) {
		t.Fatalf("Listen(%q) = %v; want ErrBadAddress wrapping a *net.AddrError", "8471", err)
	}
}
