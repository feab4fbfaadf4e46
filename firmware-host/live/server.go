package live

import (
	"context"
	"crypto/rand"
	"crypto/subtle"
	"embed"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"math/big"
	"net"
	"net/http"
	"strconv"
	"strings"
	"sync"
	"time"

	"kermalux/procedures/catalog"
	"kermalux/procedures/engine"
)

//go:embed page
var pageFS embed.FS

// Options configure a Server.
type Options struct {
	// Procedure is the procedure the session runs: its steps tell the page
	// what comes next.
	Procedure engine.Procedure
	// Code is the pairing code spoken by the board and shown at start;
	// empty: six random digits.
	Code string
	// Token is the pairing token printed once; empty: 128 random bits.
	Token string
	// MaxFailures wrong codes disable pairing by code (the token still
	// pairs); 0: 10. A six-digit code then withstands guessing with odds
	// of 1 in 100,000.
	MaxFailures int
	// BeamWarn and BeamAlarm are the cumulative beam-on warning and alarm
	// (engine defaults when zero), drawn on the page's beam-on bar.
	BeamWarn, BeamAlarm time.Duration
	// WriteTimeout bounds each write to a browser; a browser that does not
	// read is disconnected after it (0: 10 s).
	WriteTimeout time.Duration
	Log          *slog.Logger
	// Messages is the engineer's language (the bench's): the page's own
	// texts, the steps' texts and the journalled reasons it shows, and
	// the announcement. nil: English.
	Messages *catalog.Catalog
}

// Server serves the live page to paired browsers. It has no endpoint that
// changes anything: every method but GET is refused with 405.
type Server struct {
	hub  *Hub
	j    *Journal
	opts Options
	log  *slog.Logger

	pages renderedPages // the HTML in the engineer's language

	mu       sync.Mutex
	cookies  map[string]bool
	failures int
}

const cookieName = "kermalux_live"

// NewServer returns a server showing what j and the panel tee publish on hub.
func NewServer(hub *Hub, j *Journal, o Options) (*Server, error) {
	if o.Code == "" {
		n, err := rand.Int(rand.Reader, big.NewInt(1_000_000))
		if err != nil {
			return nil, fmt.Errorf("live: pairing code: %w", err)
		}
		o.Code = fmt.Sprintf("%06d", n.Int64())
	}
	if o.Token == "" {
		t, err := randomHex(16)
		if err != nil {
			return nil, fmt.Errorf("live: pairing token: %w", err)
		}
		o.Token = t
	}
	if o.MaxFailures <= 0 {
		o.MaxFailures = 10
	}
	d := engine.DefaultSettings()
	if o.BeamWarn <= 0 {
		o.BeamWarn = d.BeamWarn
	}
	if o.BeamAlarm <= 0 {
		o.BeamAlarm = d.BeamAlarm
	}
	if o.WriteTimeout <= 0 {
		o.WriteTimeout = 10 * time.Second
	}
	if o.Log == nil {
		o.Log = slog.Default()
	}
	pages, err := renderPages(o.Messages)
	if err != nil {
		return nil, err
	}
	return &Server{hub: hub, j: j, opts: o, log: o.Log, cookies: map[string]bool{}, pages: pages}, nil
}

// SetProcedure tells the page which procedure runs (its steps say what
// comes next), when it is known only after the server started.
func (s *Server) SetProcedure(p engine.Procedure) {
	s.mu.Lock()
	s.opts.Procedure = p
	s.mu.Unlock()
}

// Code is the pairing code.
func (s *Server) Code() string { return s.opts.Code }

// Token is the pairing token.
func (s *Server) Token() string { return s.opts.Token }

// SpokenCode is the pairing code digit by digit, for the board to say.
func (s *Server) SpokenCode() string { return strings.Join(strings.Split(s.opts.Code, ""), " ") }

func randomHex(n int) (string, error) {
	b := make([]byte, n)
	if _, err := rand.Read(b); err != nil {
		return "", err
	}
	return hex.EncodeToString(b), nil
}

// ServeHTTP implements http.Handler.
func (s *Server) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	h := w.Header()
	h.Set("Cache-Control", "no-store")
	h.Set("X-Content-Type-Options", "nosniff")
	h.Set("X-Frame-Options", "DENY")
	h.Set("Referrer-Policy", "no-referrer")
	h.Set("Content-Security-Policy", "default-src 'self'; img-src 'self' data:; frame-ancestors 'none'; form-action 'self'")
	if r.Method != http.MethodGet {
		// Read-only by construction: nothing here may start a step or an exposure.
		h.Set("Allow", http.MethodGet)
		http.Error(w, "read-only: only GET is served", http.StatusMethodNotAllowed)
		return
	}
	switch r.URL.Path {
	case "/pair":
		s.pair(w, r)
		return
	case "/app.css": // the pairing form's style; it holds nothing of the session
		s.file(w, "page/app.css", "text/css; charset=utf-8")
		return
	}
	if t := r.URL.Query().Get("token"); t != "" && r.URL.Path == "/" {
		if subtle.ConstantTimeCompare([]byte(t), []byte(s.opts.Token)) == 1 {
			s.admit(w, r)
			return
		}
		s.fail(r, "token")
	}
	if !s.paired(r) {
		s.refuse(w, r)
		return
	}
	switch r.URL.Path {
	case "/":
		w.Header().Set("Content-Type", "text/html; charset=utf-8")
		_, _ = w.Write(s.pages.index)
	case "/app.js":
		s.file(w, "page/app.js", "text/javascript; charset=utf-8")
	case "/events":
		s.events(w, r)
	default:
		http.NotFound(w, r)
	}
}

func (s *Server) file(w http.ResponseWriter, name, ctype string) {
	b, err := pageFS.ReadFile(name)
	if err != nil {
		http.Error(w, "missing page file", http.StatusInternalServerError)
		return
	}
	w.Header().Set("Content-Type", ctype)
	_, _ = w.Write(b)
}

func (s *Server) paired(r *http.Request) bool {
	c, err := r.Cookie(cookieName)
	if err != nil {
		return false
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.cookies[c.Value]
}

// refuse answers an unpaired client: the pairing form for the page, and
// nothing at all for anything else.
func (s *Server) refuse(w http.ResponseWriter, r *http.Request) {
	if r.URL.Path != "/" {
		http.Error(w, "not paired", http.StatusUnauthorized)
		return
	}
	w.Header().Set("Content-Type", "text/html; charset=utf-8")
	w.WriteHeader(http.StatusUnauthorized)
	_, _ = w.Write(s.pages.pair)
}

func (s *Server) pair(w http.ResponseWriter, r *http.Request) {
	code := strings.TrimSpace(r.URL.Query().Get("code"))
	s.mu.Lock()
	locked := s.failures >= s.opts.MaxFailures
	s.mu.Unlock()
	if locked {
		http.Error(w, "pairing by code is locked after too many wrong codes; use the printed token or restart the live view", http.StatusForbidden)
		return
	}
	if code == "" || subtle.ConstantTimeCompare([]byte(code), []byte(s.opts.Code)) != 1 {
		s.fail(r, "code")
		w.Header().Set("Content-Type", "text/html; charset=utf-8")
		w.WriteHeader(http.StatusUnauthorized)
		_, _ = w.Write(s.pages.pair)
		return
	}
	s.admit(w, r)
}

func (s *Server) fail(r *http.Request, what string) {
	s.mu.Lock()
	s.failures++
	n := s.failures
	s.mu.Unlock()
	s.log.Warn("live view: wrong pairing "+what, "from", r.RemoteAddr, "failures", n)
}

// admit pairs the browser: a random cookie, then the page without the
// code or token in its address.
func (s *Server) admit(w http.ResponseWriter, r *http.Request) {
	v, err := randomHex(32)
	if err != nil {
		http.Error(w, "pairing failed", http.StatusInternalServerError)
		return
	}
	s.mu.Lock()
	s.cookies[v] = true
	s.mu.Unlock()
	http.SetCookie(w, &http.Cookie{Name: cookieName, Value: v, Path: "/", HttpOnly: true, SameSite: http.SameSiteStrictMode})
	s.log.Info("live view: browser paired", "from", r.RemoteAddr)
	http.Redirect(w, r, "/", http.StatusSeeOther)
}

// stepInfo is one step of the procedure as the page lists it.
type stepInfo struct {
	ID        string `json:"id"`
	Kind      string `json:"kind"`
	Text      string `json:"text"`
	FieldMode string `json:"field_mode,omitempty"`
}

type hello struct {
	Title     string     `json:"title"`
	Procedure string     `json:"procedure"`
	Session   string     `json:"session"`
	After     int64      `json:"after"`
	Steps     []stepInfo `json:"steps"`
	BeamWarn  float64    `json:"beam_warn_s"`
	BeamAlarm float64    `json:"beam_alarm_s"`
}

func firstSentence(s string) string {
	s = strings.TrimSpace(s)
	if i := strings.IndexAny(s, ".\n"); i > 0 {
		return s[:i]
	}
	return s
}

// events streams server-sent events: a hello (the procedure's steps), the
// session's journal from after Last-Event-ID (the catch-up), then what the
// tees publish. A browser that falls behind is dropped by the hub; its
// EventSource reconnects with Last-Event-ID and catches up from the journal.
func (s *Server) events(w http.ResponseWriter, r *http.Request) {
	ctx := r.Context()
	rc := http.NewResponseController(w)
	var after int64
	if v := r.Header.Get("Last-Event-ID"); v != "" {
		after, _ = strconv.ParseInt(v, 10, 64)
	} else if v := r.URL.Query().Get("after"); v != "" {
		after, _ = strconv.ParseInt(v, 10, 64)
	}
	sub := s.hub.Subscribe()
	defer sub.Close()
	session := s.j.Session()
	if session == "" {
		after = 0
	}

	h := w.Header()
	h.Set("Content-Type", "text/event-stream")
	h.Set("X-Accel-Buffering", "no")
	w.WriteHeader(http.StatusOK)

	var buf []byte
	send := func() error {
		if len(buf) == 0 {
			return nil
		}
		_ = rc.SetWriteDeadline(time.Now().Add(s.opts.WriteTimeout))
		_, err := w.Write(buf)
		buf = buf[:0]
		if err == nil {
			err = rc.Flush()
		}
		return err
	}
	add := func(seq int64, data []byte) {
		if seq > 0 {
			buf = append(buf, "id: "...)
			buf = strconv.AppendInt(buf, seq, 10)
			buf = append(buf, '\n')
		}
		buf = append(buf, "data: "...)
		buf = append(buf, data...)
		buf = append(buf, "\n\n"...)
	}

	s.mu.Lock()
	proc := s.opts.Procedure
	s.mu.Unlock()
	steps := make([]stepInfo, len(proc.Steps))
	for i, st := range proc.Steps {
		steps[i] = stepInfo{ID: st.ID, Kind: string(st.Kind), Text: firstSentence(s.opts.Messages.Text(st.Text)), FieldMode: st.FieldMode}
	}
	hb, _ := json.Marshal(wire{Kind: "live_hello", Payload: hello{Title: s.opts.Messages.Text(proc.Title), Procedure: proc.Name,
		Session: session, After: after, Steps: steps, BeamWarn: s.opts.BeamWarn.Seconds(), BeamAlarm: s.opts.BeamAlarm.Seconds()}})
	add(0, hb)
	last := after
	if session != "" {
		envs, err := s.j.Envelopes(ctx, session)
		if err != nil {
			s.log.Warn("live view: reading the journal for a browser", "session", session, "err", err)
		}
		for _, e := range envs {
			if e.Seq <= last {
				continue
			}
			data, err := json.Marshal(e)
			if err != nil {
				continue
			}
			add(e.Seq, translatePayload(s.opts.Messages, data))
			last = e.Seq
			if len(buf) > 64<<10 {
				if err := send(); err != nil {
					return
				}
			}
		}
	}
	if err := send(); err != nil {
		return
	}

	take := func(ev Event) {
		if ev.Session != "" && ev.Session != session {
			session, last = ev.Session, 0
		}
		if ev.Seq > 0 {
			if ev.Seq <= last {
				return
			}
			last = ev.Seq
		}
		add(ev.Seq, translatePayload(s.opts.Messages, ev.Data))
	}
	tick := time.NewTicker(15 * time.Second)
	defer tick.Stop()
	for {
		select {
		case ev, ok := <-sub.C():
			if !ok {
				// Dropped for falling behind: end the stream; the browser
				// reconnects and catches up from the journal.
				return
			}
			take(ev)
			// Take what else is waiting, then write once.
		drain:
			for len(buf) < 64<<10 {
				select {
				case ev, ok := <-sub.C():
					if !ok {
						_ = send()
						return
					}
					take(ev)
				default:
					break drain
				}
			}
			if err := send(); err != nil {
				return
			}
		case <-tick.C:
			buf = append(buf, ": keepalive\n\n"...)
			if err := send(); err != nil {
				return
			}
		case <-ctx.Done():
			return
		}
	}
}

// Serve serves on l until ctx is done.
func (s *Server) Serve(ctx context.Context, l net.Listener) error {
	srv := &http.Server{Handler: s, ReadHeaderTimeout: 5 * time.Second, BaseContext: func(net.Listener) context.Context { return ctx }}
	done := make(chan struct{})
	go func() {
		select {
		case <-ctx.Done():
			sctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
			_ = srv.Shutdown(sctx)
			cancel()
			_ = srv.Close()
		case <-done:
		}
	}()
	err := srv.Serve(l)
	close(done)
	if errors.Is(err, http.ErrServerClosed) {
		return nil
	}
	return fmt.Errorf("live view on %s: %w", l.Addr(), err)
}
