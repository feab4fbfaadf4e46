package transfer

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
	"time"

	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/store"
)

// Receiver is the part of the store the HTTP endpoint needs.
type Receiver interface {
	Marks(ctx context.Context, board string, sessions []string) (map[string]int64, error)
	Apply(ctx context.Context, b *journal.Batch) (store.Applied, error)
}

// Handler serves the sync protocol over st. log may be nil.
func Handler(st Receiver, log *slog.Logger) http.Handler {
	if log == nil {
		log = slog.Default()
	}
	mux := http.NewServeMux()
	mux.HandleFunc("POST /v1/marks", func(w http.ResponseWriter, r *http.Request) {
		body, ok := readBody(w, r)
		if !ok {
			return
		}
		var req MarksRequest
		if err := json.Unmarshal(body, &req); err != nil {
			refuse(w, http.StatusBadRequest, "malformed", fmt.Sprintf("marks request: %v", describeJSON(body, err)))
			return
		}
		if _, err := journal.ParsePublicKey(req.Board); err != nil {
			refuse(w, http.StatusBadRequest, "malformed", err.Error())
			return
		}
		marks, err := st.Marks(r.Context(), req.Board, req.Sessions)
		if err != nil {
			storeError(w, log, r, err)
			return
		}
		writeJSON(w, http.StatusOK, MarksResponse{Marks: marks})
	})
	mux.HandleFunc("POST /v1/batch", func(w http.ResponseWriter, r *http.Request) {
		body, ok := readBody(w, r)
		if !ok {
			return
		}
		b, err := DecodeBatch(body)
		if err != nil {
			refuse(w, http.StatusBadRequest, "malformed", err.Error())
			return
		}
		a, err := st.Apply(r.Context(), b)
		if err != nil {
			storeError(w, log, r, err)
			return
		}
		log.Info("batch stored", "board", b.Board[:16], "session", b.Session, "first", b.First(), "last", b.Last(), "stored", a.Stored)
		writeJSON(w, http.StatusOK, BatchResponse(a))
	})
	return mux
}

func readBody(w http.ResponseWriter, r *http.Request) ([]byte, bool) {
	body, err := io.ReadAll(http.MaxBytesReader(w, r.Body, MaxBody))
	if err != nil {
		var mbe *http.MaxBytesError
		if errors.As(err, &mbe) {
			refuse(w, http.StatusRequestEntityTooLarge, "malformed", fmt.Sprintf("request body over %d bytes; send smaller batches", MaxBody))
		} else {
			refuse(w, http.StatusBadRequest, "malformed", fmt.Sprintf("request body cut short: %v", err))
		}
		return nil, false
	}
	return body, true
}

func storeError(w http.ResponseWriter, log *slog.Logger, r *http.Request, err error) {
	code, kind := http.StatusInternalServerError, "internal"
	switch {
	case errors.Is(err, store.ErrNotEnrolled):
		code, kind = http.StatusForbidden, "not_enrolled"
	case errors.Is(err, store.ErrConflict):
		code, kind = http.StatusForbidden, "conflict"
	case errors.Is(err, store.ErrRefused):
		code, kind = http.StatusForbidden, "refused"
	case errors.Is(err, store.ErrReplay):
		code, kind = http.StatusConflict, "replay"
	case errors.Is(err, store.ErrGap):
		code, kind = http.StatusConflict, "gap"
	}
	log.Warn("sync request refused", "from", r.RemoteAddr, "path", r.URL.Path, "status", code, "reason", err)
	refuse(w, code, kind, err.Error())
}

func refuse(w http.ResponseWriter, code int, kind, reason string) {
	writeJSON(w, code, Refusal{Error: kind, Reason: reason})
}

func writeJSON(w http.ResponseWriter, code int, v any) {
	w.Header().Set("Content-Type", "application/json")
	w.WriteHeader(code)
	json.NewEncoder(w).Encode(v)
}

// ServeOptions configure Serve.
type ServeOptions struct {
	CertFile, KeyFile string // both set: serve HTTPS
	Log               *slog.Logger
	Ready             func(addr net.Addr) // called once listening
}

// Serve listens on addr and serves the sync protocol over st until ctx ends.
func Serve(ctx context.Context, addr string, st Receiver, opts ServeOptions) error {
	ln, err := net.Listen("tcp", addr)
	if err != nil {
		return fmt.Errorf("listen on %s: %w", addr, err)
	}
	srv := &http.Server{Handler: Handler(st, opts.Log), ReadHeaderTimeout: 10 * time.Second, ReadTimeout: 5 * time.Minute}
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
