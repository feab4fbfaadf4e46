// Package receive is the workstation's side of sync: the HTTP receiver
// that stores what enrolled boards push, and the import of bundle files.
// Both read the wire format as a stream, segment by segment: memory stays
// bounded whatever a sender sends, and an unenrolled or revoked board is
// refused from the stream's first bytes.
package receive

import (
	"context"
	"crypto/tls"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/http"
	"strconv"
	"strings"
	"time"

	"kermalux/firmware-host/journal/store"
	"kermalux/firmware-host/journal/transfer"
	"kermalux/firmware-host/journal/transfer/wire"
)

// Limits of the receiver: none can be switched off, only set.
const (
	DefaultConcurrent = 8       // pushes served at once; more wait for a slot, then are told to retry
	DefaultMaxBody    = 1 << 30 // compressed bytes of one push (about ten million readings)
	slotWait          = 5 * time.Second
)

// Options configure the handler.
type Options struct {
	Log        *slog.Logger // nil: slog.Default()
	Concurrent int          // default DefaultConcurrent
	MaxBody    int64        // default DefaultMaxBody
}

// Handler serves the sync protocol over st.
func Handler(st *store.Store, opts Options) http.Handler {
	if opts.Log == nil {
		opts.Log = slog.Default()
	}
	if opts.Concurrent <= 0 {
		opts.Concurrent = DefaultConcurrent
	}
	if opts.MaxBody <= 0 {
		opts.MaxBody = DefaultMaxBody
	}
	h := &handler{st: st, opts: opts, slots: make(chan struct{}, opts.Concurrent)}
	mux := http.NewServeMux()
	mux.HandleFunc("POST "+wire.PathMarks, h.marks)
	mux.HandleFunc("POST "+wire.PathPush, h.push)
	return mux
}

type handler struct {
	st    *store.Store
	opts  Options
	slots chan struct{}
}

// acquire takes a slot or answers 503.
func (h *handler) acquire(w http.ResponseWriter, r *http.Request) bool {
	t := time.NewTimer(slotWait)
	defer t.Stop()
	select {
	case h.slots <- struct{}{}:
		return true
	case <-t.C:
	case <-r.Context().Done():
	}
	w.Header().Set("Retry-After", "2")
	refuse(w, http.StatusServiceUnavailable, "busy", fmt.Sprintf("the receiver is serving %d pushes; try again shortly", h.opts.Concurrent))
	return false
}

func (h *handler) release() { <-h.slots }

func (h *handler) marks(w http.ResponseWriter, r *http.Request) {
	if !h.acquire(w, r) {
		return
	}
	defer h.release()
	body := http.MaxBytesReader(w, r.Body, wire.MaxMarksBody)
	req, err := h.readMarks(r.Context(), body, r.RemoteAddr)
	if err != nil {
		var mbe *http.MaxBytesError
		switch {
		case errors.As(err, &mbe):
			refuse(w, http.StatusRequestEntityTooLarge, "too_large", fmt.Sprintf("marks request over %d bytes", wire.MaxMarksBody))
		case store.IsRefusal(err):
			h.storeError(w, r, err)
		default:
			refuse(w, http.StatusBadRequest, "malformed", fmt.Sprintf("marks request: %v", err))
		}
		return
	}
	marks, err := h.st.Marks(r.Context(), req.Board, req.Sessions)
	if err != nil {
		h.storeError(w, r, err)
		return
	}
	writeJSON(w, http.StatusOK, wire.MarksResponse{Store: h.st.ID(), Marks: marks})
}

// readMarks reads a marks request as a stream of JSON tokens: the board
// key first, checked (enrolled, not revoked) before any session id is
// read, then at most wire.MaxMarksSessions ids of at most wire.MaxString
// bytes each. Memory stays bounded by what is asked, not by the body.
func (h *handler) readMarks(ctx context.Context, body io.Reader, from string) (wire.MarksRequest, error) {
	var req wire.MarksRequest
	dec := json.NewDecoder(&shortTokens{r: body, max: wire.MaxString + 64})
	str := func(what string) (string, error) {
		tok, err := dec.Token()
		if err != nil {
			return "", fmt.Errorf("%s: %w", what, err)
		}
		v, ok := tok.(string)
		if !ok || len(v) > wire.MaxString {
			return "", fmt.Errorf("%s: expected a string of at most %d bytes, got %v", what, wire.MaxString, tok)
		}
		return v, nil
	}
	delim := func(want json.Delim, what string) error {
		tok, err := dec.Token()
		if err != nil {
			return fmt.Errorf("%s: %w", what, err)
		}
		if d, ok := tok.(json.Delim); !ok || d != want {
			return fmt.Errorf("%s: expected %q, got %v", what, want, tok)
		}
		return nil
	}
	if err := delim('{', "start"); err != nil {
		return req, err
	}
	if k, err := str("first key"); err != nil || k != "board" {
		return req, fmt.Errorf(`expected "board" as the first key (%q, %v)`, k, err)
	}
	var err error
	if req.Board, err = str("board"); err != nil {
		return req, err
	}
	pub, err := store.ParseKey(req.Board)
	if err != nil {
		return req, err
	}
	if err := h.st.CheckBoard(ctx, pub, from); err != nil {
		return req, err
	}
	if k, err := str("second key"); err != nil || k != "sessions" {
		return req, fmt.Errorf(`expected "sessions" after "board" (%q, %v)`, k, err)
	}
	switch tok, err := dec.Token(); {
	case err != nil:
		return req, fmt.Errorf("sessions: %w", err)
	case tok == nil: // null: no sessions
		if err := delim('}', "end"); err != nil {
			return req, err
		}
		return req, nil
	case tok != json.Delim('['):
		return req, fmt.Errorf("sessions: expected a list, got %v", tok)
	}
	for dec.More() {
		if len(req.Sessions) == wire.MaxMarksSessions {
			return req, fmt.Errorf("more than %d sessions", wire.MaxMarksSessions)
		}
		id, err := str(fmt.Sprintf("session %d", len(req.Sessions)+1))
		if err != nil {
			return req, err
		}
		req.Sessions = append(req.Sessions, id)
	}
	if err := delim(']', "end of sessions"); err != nil {
		return req, err
	}
	if err := delim('}', "end"); err != nil {
		return req, err
	}
	if _, err := dec.Token(); !errors.Is(err, io.EOF) {
		return req, errors.New("data after the request")
	}
	return req, nil
}

// shortTokens passes JSON text through while no run of bytes between
// structural characters ({}[]:, outside strings) is longer than max: a
// json.Decoder buffers a whole token (or a whole run of white space)
// before it can be looked at, so a 60 MB string would be held whole.
type shortTokens struct {
	r        io.Reader
	max, run int
	inString bool
	escaped  bool
}

func (s *shortTokens) Read(b []byte) (int, error) {
	n, err := s.r.Read(b)
	for _, c := range b[:n] {
		switch {
		case s.escaped:
			s.escaped = false
		case s.inString && c == '\\':
			s.escaped = true
		case c == '"':
			s.inString, s.run = !s.inString, 0
		case !s.inString && strings.IndexByte("{}[]:,", c) >= 0:
			s.run = 0
		}
		if s.run++; s.run > s.max {
			return 0, fmt.Errorf("a token or a run of white space longer than %d bytes", s.max)
		}
	}
	return n, err
}

func (h *handler) push(w http.ResponseWriter, r *http.Request) {
	if !h.acquire(w, r) {
		return
	}
	defer h.release()
	body := http.MaxBytesReader(w, r.Body, h.opts.MaxBody)
	rd, err := wire.ReadPreamble(body, "push")
	if err != nil {
		h.readError(w, r, err)
		return
	}
	pre := rd.Preamble()
	if pre.Kind != wire.KindPush {
		refuse(w, http.StatusBadRequest, "malformed", "push: the stream is a bundle; import it with kermalux import")
		return
	}
	// The board is checked before anything else is read.
	if err := h.st.CheckBoard(r.Context(), pre.Board, r.RemoteAddr); err != nil {
		h.storeError(w, r, err)
		return
	}
	if pre.Audience != h.st.ID() {
		h.storeError(w, r, fmt.Errorf("%w: the push is signed for store %q, this store is %q", store.ErrAudience, pre.Audience, h.st.ID()))
		return
	}
	resp, err := h.apply(r.Context(), rd)
	if err != nil {
		var re readErr
		if errors.As(err, &re) {
			h.readError(w, r, re.error)
		} else {
			h.storeError(w, r, err)
		}
		return
	}
	segs, recs := rd.Counts()
	h.opts.Log.Info("push stored", "board", pre.BoardHex()[:16], "from", r.RemoteAddr, "segments", segs, "records", recs, "stored", resp.Stored)
	writeJSON(w, http.StatusOK, resp)
}

// maxGroup is the most segments committed together.
const maxGroup = 16

// readErr marks a failure to read the stream (not the store's).
type readErr struct{ error }

// apply stores the stream's segments as they arrive. One goroutine decodes
// (inflate, hash) while this one applies, so both cores work; segments
// that are already waiting are committed together (at most maxGroup), and
// a segment is committed at once when no other waits, so that a slow link
// never holds a transaction open while the next segment trickles in. A
// refused segment leaves nothing of itself; the segments before it stay.
func (h *handler) apply(ctx context.Context, rd *wire.Reader) (wire.PushResponse, error) {
	resp := wire.PushResponse{High: map[string]int64{}}
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	segs, rerr := decode(ctx, rd)
	var tx *store.Tx
	var pending wire.PushResponse
	grouped := 0
	commit := func() error {
		if tx == nil {
			return nil
		}
		err := tx.Commit()
		tx, grouped = nil, 0
		if err != nil {
			return err
		}
		resp.Stored += pending.Stored
		resp.Duplicates += pending.Duplicates
		for id, hi := range pending.High {
			resp.High[id] = hi
		}
		pending = wire.PushResponse{High: map[string]int64{}}
		return nil
	}
	defer func() {
		if tx != nil {
			tx.Rollback()
		}
	}()
	pending.High = map[string]int64{}
	for d := range segs {
		seg := d.seg
		if tx == nil {
			var err error
			if tx, err = h.st.Begin(ctx); err != nil {
				return resp, err
			}
		}
		a, err := tx.Apply(ctx, seg, store.ApplyOptions{Parsed: d.parsed})
		if err != nil {
			if store.IsRefusal(err) { // it wrote nothing: keep the segments before it
				if cerr := commit(); cerr != nil {
					return resp, cerr
				}
			}
			return resp, fmt.Errorf("push: segment %d: %w", seg.Index, err)
		}
		pending.Stored += int64(a.Stored)
		pending.Duplicates += int64(a.Duplicates)
		pending.High[seg.Session] = a.High
		if grouped++; len(segs) == 0 || grouped >= maxGroup {
			if err := commit(); err != nil {
				return resp, err
			}
		}
	}
	if err := commit(); err != nil {
		return resp, err
	}
	if err := <-rerr; err != nil {
		return resp, readErr{err}
	}
	return resp, nil
}

// decoded is a segment read and verified, with the payloads the store
// reads from it parsed (store.Parse), off the goroutine that stores.
type decoded struct {
	seg    *wire.Segment
	parsed *store.Parsed
}

// decode reads segments from rd in a goroutine, verifying each one's
// signature with the stream's board key (enrolled: checked from the
// preamble) and parsing its payloads for the store, at most one ahead of
// the consumer: a request holds at most
// three decoded segments (one being read, one waiting, one being
// stored), each at most wire.MaxSegmentBytes. The error channel gets
// nil after the closing frame.
func decode(ctx context.Context, rd *wire.Reader) (<-chan decoded, <-chan error) {
	segs := make(chan decoded, 1)
	rerr := make(chan error, 1)
	go func() {
		defer close(segs)
		for {
			seg, err := rd.Next()
			if err == nil {
				if err = seg.Verify(rd.Preamble().Board); err != nil {
					err = fmt.Errorf("%s: segment %d: %w", rd.Name(), seg.Index, err)
				}
			}
			if err != nil {
				if errors.Is(err, io.EOF) {
					err = nil
				}
				rerr <- err
				return
			}
			select {
			case segs <- decoded{seg, store.Parse(seg)}:
			case <-ctx.Done():
				rerr <- ctx.Err()
				return
			}
		}
	}()
	return segs, rerr
}

// readError answers a stream that does not decode: a record that does not
// match its proof is refused (403, named); a cut or garbled body is 400.
func (h *handler) readError(w http.ResponseWriter, r *http.Request, err error) {
	var mbe *http.MaxBytesError
	switch {
	case errors.As(err, &mbe):
		refuse(w, http.StatusRequestEntityTooLarge, "too_large", fmt.Sprintf("push over %d bytes; push again (it resumes)", h.opts.MaxBody))
	case errors.Is(err, wire.ErrProof):
		h.opts.Log.Warn("push refused", "from", r.RemoteAddr, "reason", err)
		refuse(w, http.StatusForbidden, "refused", err.Error())
	default:
		refuse(w, http.StatusBadRequest, "malformed", err.Error())
	}
}

func (h *handler) storeError(w http.ResponseWriter, r *http.Request, err error) {
	code, kind := http.StatusInternalServerError, "internal"
	switch {
	case errors.Is(err, store.ErrNotEnrolled):
		code, kind = http.StatusForbidden, "not_enrolled"
	case errors.Is(err, store.ErrRevoked):
		code, kind = http.StatusForbidden, "revoked"
	case errors.Is(err, store.ErrAudience):
		code, kind = http.StatusForbidden, "audience"
	case errors.Is(err, store.ErrConflict):
		code, kind = http.StatusForbidden, "conflict"
	case errors.Is(err, store.ErrRefused):
		code, kind = http.StatusForbidden, "refused"
	case errors.Is(err, store.ErrReplay):
		code, kind = http.StatusConflict, "replay"
	case errors.Is(err, store.ErrGap):
		code, kind = http.StatusConflict, "gap"
	}
	h.opts.Log.Warn("sync request refused", "from", r.RemoteAddr, "path", r.URL.Path, "status", code, "reason", err)
	refuse(w, code, kind, err.Error())
}

func refuse(w http.ResponseWriter, code int, kind, reason string) {
	if code >= 400 {
		// Whatever is left of the body is not read: close the connection.
		w.Header().Set("Connection", "close")
	}
	writeJSON(w, code, wire.Refusal{Error: kind, Reason: reason})
}

func writeJSON(w http.ResponseWriter, code int, v any) {
	b, _ := json.Marshal(v)
	w.Header().Set("Content-Type", "application/json")
	w.Header().Set("Content-Length", strconv.Itoa(len(b)+1))
	w.WriteHeader(code)
	w.Write(append(b, '\n'))
}

// ServeOptions configure Serve.
type ServeOptions struct {
	Options
	CertFile, KeyFile string              // both set: serve HTTPS
	Ready             func(addr net.Addr) // called once listening
}

// Serve listens on addr and serves the sync protocol over st until ctx ends.
func Serve(ctx context.Context, addr string, st *store.Store, opts ServeOptions) error {
	ln, err := net.Listen("tcp", addr)
	if err != nil {
		return fmt.Errorf("listen on %s: %w", addr, err)
	}
	srv := &http.Server{Handler: Handler(st, opts.Options), ReadHeaderTimeout: 10 * time.Second, IdleTimeout: 2 * time.Minute,
		MaxHeaderBytes: 64 << 10}
	if opts.CertFile != "" || opts.KeyFile != "" {
		cert, err := tls.LoadX509KeyPair(opts.CertFile, opts.KeyFile)
		if err != nil {
			ln.Close()
			return fmt.Errorf("TLS certificate %s / key %s: %w", opts.CertFile, opts.KeyFile, err)
		}
		srv.TLSConfig = &tls.Config{Certificates: []tls.Certificate{cert}, MinVersion: tls.VersionTLS12}
		ln = tls.NewListener(ln, srv.TLSConfig)
	}
	if opts.Ready != nil {
		opts.Ready(ln.Addr())
	}
	errc := make(chan error, 1)
	go func() { errc <- srv.Serve(ln) }()
	select {
	case <-ctx.Done():
		sctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
		defer cancel()
		srv.Shutdown(sctx)
		return nil
	case err := <-errc:
		return fmt.Errorf("serve %s: %w", addr, err)
	}
}

// ImportSummary says what an import stored.
type ImportSummary struct {
	Segments   int64
	Records    int64
	Stored     int64
	Duplicates int64
}

func (s ImportSummary) String() string {
	return fmt.Sprintf("imported %d new records from %d segments (%d already stored)", s.Stored, s.Segments, s.Duplicates)
}

// Import reads a bundle from r as a stream and applies it to the store in
// one transaction: every segment passes the same checks as a push (board
// enrolled and not revoked, signed head, chain continuity with what is
// stored), the closing signature over all segments holds, or nothing of
// the bundle is stored. Segments already stored count as duplicates:
// importing the same bundle twice stores nothing new. name labels errors.
func Import(ctx context.Context, st *store.Store, r io.Reader, name string, prog transfer.Progress) (ImportSummary, error) {
	var sum ImportSummary
	if prog == nil {
		prog = transfer.Silent{}
	}
	defer prog.Finish()
	rd, err := wire.ReadPreamble(r, name)
	if err != nil {
		return sum, err
	}
	pre := rd.Preamble()
	if pre.Kind != wire.KindBundle {
		return sum, fmt.Errorf("%s: a push stream, not a bundle", name)
	}
	if err := st.CheckBoard(ctx, pre.Board, name); err != nil {
		return sum, fmt.Errorf("%s: %w (nothing from this bundle was stored)", name, err)
	}
	if pre.Audience != "" && pre.Audience != st.ID() {
		return sum, fmt.Errorf("%s: %w: the bundle was written for store %q, this store is %q (nothing from this bundle was stored)", name, store.ErrAudience, pre.Audience, st.ID())
	}
	tx, err := st.Begin(ctx)
	if err != nil {
		return sum, err
	}
	defer tx.Rollback()
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	segs, rerr := decode(ctx, rd)
	for d := range segs {
		seg := d.seg
		a, err := tx.Apply(ctx, seg, store.ApplyOptions{AnyAudience: true, SkipReplays: true, Parsed: d.parsed})
		if err != nil {
			return ImportSummary{}, fmt.Errorf("%s: segment %d: %w (nothing from this bundle was stored)", name, seg.Index, err)
		}
		sum.Stored += int64(a.Stored)
		sum.Duplicates += int64(a.Duplicates)
		prog.Add(len(seg.Records))
	}
	if err := <-rerr; err != nil {
		return ImportSummary{}, fmt.Errorf("%w (nothing from this bundle was stored)", err)
	}
	sum.Segments, sum.Records = rd.Counts()
	if err := tx.Commit(); err != nil {
		return ImportSummary{}, fmt.Errorf("%s: %w", name, err)
	}
	return sum, nil
}
