package live

import (
	"context"
	"encoding/json"
	"net"
	"net/http"
	"net/http/httptest"
	"reflect"
	"strconv"
	"sync"
	"sync/atomic"
	"syscall"
	"testing"
	"time"

	"kermalux/drivers/clock"
	"kermalux/firmware-host/demo"
	"kermalux/procedures/catalog"
	"kermalux/procedures/engine"
	"kermalux/procedures/panel"
)

// watched runs a seeded session with the live view's tees and server, and
// a browser-like client reading the stream from start to end (or one that
// stalls). It returns the outcome and how often the browser reconnected.
func watched(t testing.TB, o demo.SeededOptions, stalled bool) (*demo.SeededOutcome, int64, *Hub) {
	hub := NewHub(0)
	var srv *Server
	var ts *httptest.Server
	var lastSeq, gaps, reconnects atomic.Int64
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	ready := make(chan struct{})
	// subscribed is closed once the server has answered the first
	// request for the stream: it subscribes to the hub before it writes
	// anything. progress tells of each event the browser reads.
	subscribed := make(chan struct{})
	var subscribedOnce sync.Once
	progress := make(chan struct{}, 1)
	o.Wrap = func(j engine.Journal, p panel.Panel, clk clock.Clock) (engine.Journal, panel.Panel) {
		tj := NewJournal(j, hub, clk)
		var err error
		msgs, err := catalog.Builtin(o.Language) // the page in the session's language
		if err != nil {
			t.Fatal(err)
		}
		srv, err = NewServer(hub, tj, Options{Log: quiet, Code: "123456", WriteTimeout: 2 * time.Second, Messages: msgs})
		if err != nil {
			t.Fatal(err)
		}
		ts = httptest.NewUnstartedServer(srv)
		ts.Config.BaseContext = func(net.Listener) context.Context { return ctx }
		if stalled {
			// The board's side of a stalled browser's connection: a small
			// send buffer, so the stall reaches the server at once.
			ts.Listener = smallSendBuffer{ts.Listener}
		}
		ts.Start()
		c := pairedClient(t, ts.URL, srv.Code())
		if stalled {
			stall(t, ts.URL, c)
			close(subscribed)
		} else {
			// A browser: reads every event and, when dropped for falling
			// behind, reconnects with Last-Event-ID as EventSource does.
			go func() {
				for ctx.Err() == nil {
					req, _ := http.NewRequestWithContext(ctx, http.MethodGet, ts.URL+"/events", nil)
					req.Header.Set("Last-Event-ID", strconv.FormatInt(lastSeq.Load(), 10))
					resp, err := c.Do(req)
					if err != nil {
						continue
					}
					subscribedOnce.Do(func() { close(subscribed) })
					for ev := range stream(resp) {
						if ev.id > 0 {
							if ev.id != lastSeq.Load()+1 {
								gaps.Add(1)
							}
							lastSeq.Store(ev.id)
							select {
							case progress <- struct{}{}:
							default:
							}
						}
					}
					resp.Body.Close()
					reconnects.Add(1)
				}
			}()
		}
		select {
		case <-subscribed:
		case <-time.After(20 * time.Second):
			t.Fatal("the live view never answered the browser")
		}
		if !hub.Watching() {
			t.Fatal("the live view answered the browser without subscribing it")
		}
		close(ready)
		return tj, NewPanel(p, hub, clk)
	}
	out, err := demo.Seeded(context.Background(), o)
	<-ready
	if err != nil {
		t.Fatal(err)
	}
	if !stalled {
		// The browser catches up with the whole journal.
		envs, _ := out.Journal.Envelopes(context.Background(), out.Summary.Session)
		timeout := time.After(20 * time.Second)
	catchUp:
		for lastSeq.Load() < int64(len(envs)) {
			select {
			case <-progress:
			case <-timeout:
				break catchUp
			}
		}
		if got := lastSeq.Load(); got != int64(len(envs)) || gaps.Load() != 0 {
			t.Errorf("the browser reached record %d of %d with %d gaps (%d reconnects)", got, len(envs), gaps.Load(), reconnects.Load())
		}
		t.Logf("browser: %d records, %d reconnects after being dropped", lastSeq.Load(), reconnects.Load())
	}
	cancel()
	ts.CloseClientConnections()
	ts.Close()
	return out, reconnects.Load(), hub
}

func pairedClient(t testing.TB, base, code string) *http.Client {
	c := client(nil)
	resp, err := c.Get(base + "/pair?code=" + code)
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if resp.StatusCode != http.StatusSeeOther {
		t.Fatalf("pairing: %s", resp.Status)
	}
	return c
}

type smallSendBuffer struct{ net.Listener }

func (l smallSendBuffer) Accept() (net.Conn, error) {
	c, err := l.Listener.Accept()
	if tc, ok := c.(*net.TCPConn); ok {
		_ = tc.SetWriteBuffer(4096)
	}
	return c, err
}

// stall opens the event stream on a raw connection with a tiny receive
// buffer and stops reading once it is answered: a browser on a phone that
// went to sleep.
func stall(t testing.TB, base string, c *http.Client) {
	u := base[len("http://"):]
	req, _ := http.NewRequest(http.MethodGet, base+"/events", nil)
	for _, ck := range c.Jar.Cookies(req.URL) {
		req.AddCookie(ck)
	}
	// The receive buffer is set before connecting, so the window the
	// browser advertises is small from the start.
	d := net.Dialer{Control: func(_, _ string, rc syscall.RawConn) error {
		return rc.Control(func(fd uintptr) { _ = syscall.SetsockoptInt(int(fd), syscall.SOL_SOCKET, syscall.SO_RCVBUF, 1024) })
	}}
	conn, err := d.Dial("tcp", u)
	if err != nil {
		t.Fatal(err)
	}
	if err := req.Write(conn); err != nil {
		t.Fatal(err)
	}
	// One byte of the answer: the server subscribes to the hub before it
	// writes anything. Nothing more is read; closed with the test server.
	_ = conn.SetReadDeadline(time.Now().Add(20 * time.Second))
	if _, err := conn.Read(make([]byte, 1)); err != nil {
		t.Fatalf("the stalled browser got no answer: %v", err)
	}
}

// The live view changes nothing that is measured: the same seeded session
// gives identical results, budgets and beam-on time with the view on (a
// browser watching every event) and off; in English with the room air
// entered, and in German and French with the room air read from the
// simulated sensor and the page in that language (its server translating
// what it sends).
func TestSameResultsWithLiveViewOnAndOff(t *testing.T) {
	if testing.Short() {
		t.Skip("two whole seeded sessions per case")
	}
	for _, tc := range []struct {
		name string
		o    demo.SeededOptions
	}{
		{"English, room air entered", demo.SeededOptions{}},
		{"German, room air from the sensor", demo.SeededOptions{Language: "de", RoomAir: true}},
		{"French, room air from the sensor", demo.SeededOptions{Language: "fr", RoomAir: true}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			o := tc.o
			o.Dir = t.TempDir()
			off, err := demo.Seeded(context.Background(), o)
			if err != nil {
				t.Fatal(err)
			}
			o.Dir = t.TempDir()
			on, _, _ := watched(t, o, false)
			if len(off.Summary.Results) == 0 {
				t.Fatal("no results")
			}
			if (on.Config.RoomAir != nil) != o.RoomAir || (off.Config.RoomAir != nil) != o.RoomAir {
				t.Fatalf("room-air sensor configured %v / %v, want %v", on.Config.RoomAir != nil, off.Config.RoomAir != nil, o.RoomAir)
			}
			a, _ := json.Marshal(off.Summary.Results)
			b, _ := json.Marshal(on.Summary.Results)
			if string(a) != string(b) || off.Summary.BeamOn != on.Summary.BeamOn || off.Readings != on.Readings {
				t.Errorf("live view changed the session: %d vs %d readings, beam-on %v vs %v, results equal %v",
					off.Readings, on.Readings, off.Summary.BeamOn, on.Summary.BeamOn, reflect.DeepEqual(off.Summary.Results, on.Summary.Results))
			}
		})
	}
}

// BenchmarkSamplingWithStalledClient: readings per second of a seeded whole
// acceptance session (about 4,000 readings, some 3 MB of events) with the
// live view and nobody watching, and
// with a paired browser that stopped reading, in the same run. The stalled
// browser is dropped by the hub; sampling must not slow down. The rate is
// over the engine's run alone (SeededOutcome.Ran): starting the test's
// HTTP server and pairing the browser is not sampling.
func BenchmarkSamplingWithStalledClient(b *testing.B) {
	for _, tc := range []struct {
		name    string
		stalled bool
	}{{"nobody", false}, {"stalled", true}, {"nobody-again", false}} {
		b.Run(tc.name, func(b *testing.B) {
			var readings int
			var dropped int64
			var ran time.Duration
			for i := 0; i < b.N; i++ {
				o := demo.SeededOptions{Dir: b.TempDir()}
				var out *demo.SeededOutcome
				if tc.stalled {
					var hub *Hub
					out, _, hub = watched(b, o, true)
					dropped += hub.Dropped()
				} else {
					o.Wrap = func(j engine.Journal, p panel.Panel, clk clock.Clock) (engine.Journal, panel.Panel) {
						hub := NewHub(0)
						return NewJournal(j, hub, clk), NewPanel(p, hub, clk)
					}
					var err error
					if out, err = demo.Seeded(context.Background(), o); err != nil {
						b.Fatal(err)
					}
				}
				readings += out.Readings
				ran += out.Ran
			}
			b.ReportMetric(float64(readings)/ran.Seconds(), "readings/s")
			b.ReportMetric(float64(dropped)/float64(b.N), "dropped/op")
		})
	}
}
