package transfer

import (
	"bytes"
	"context"
	"crypto/tls"
	"crypto/x509"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"os"
	"strings"
	"time"

	"kermalux/drivers/clock"
	"kermalux/firmware-host/journal"
)

// Source is the part of the board journal a push reads.
type Source interface {
	BoardKey() string
	Sessions(ctx context.Context) ([]journal.SessionSummary, error)
	NextBatch(ctx context.Context, session string, after int64, n int) (*journal.Batch, error)
}

// PushOptions configure Push.
type PushOptions struct {
	URL        string       // base URL of the receiving workstation, e.g. http://office:8470
	Client     *http.Client // default: 60 s timeout
	BatchSize  int          // records per batch; default 500
	Retries    int          // attempts in a row without progress before giving up; default 8
	RetryDelay time.Duration
	Clock      clock.Clock // for waits between retries; default real
	Progress   Progress    // default silent
	// NewProgress, if set, is called once the total is known.
	NewProgress func(total int64) Progress
}

// PushSummary says what a push did.
type PushSummary struct {
	Sessions   int           // sessions with records to send
	Sent       int64         // records the workstation stored
	Duplicates int64         // records it already had
	Retries    int           // failed attempts recovered from
	Elapsed    time.Duration // real time taken
}

func (s PushSummary) String() string {
	return fmt.Sprintf("pushed %d records of %d sessions (%d already there, %d retries) in %s",
		s.Sent, s.Sessions, s.Duplicates, s.Retries, s.Elapsed.Round(time.Millisecond))
}

// RefusedError is a refusal from the workstation that retrying cannot fix.
type RefusedError struct {
	Status int
	Refusal
}

func (e *RefusedError) Error() string {
	return fmt.Sprintf("workstation refused (HTTP %d %s): %s", e.Status, e.Refusal.Error, e.Reason)
}

// Push sends every record the workstation does not have yet, batch by
// batch. It resumes after any interruption (a cut connection, a workstation
// restart): it asks the workstation for its high-water marks again and
// sends from there, so each record ends up stored once.
func Push(ctx context.Context, src Source, opts PushOptions) (sum PushSummary, err error) {
	start := time.Now()
	defer func() { sum.Elapsed = time.Since(start) }()
	if opts.Client == nil {
		opts.Client = &http.Client{Timeout: 60 * time.Second}
	}
	if opts.BatchSize <= 0 {
		opts.BatchSize = 500
	}
	if opts.Retries <= 0 {
		opts.Retries = 8
	}
	if opts.RetryDelay <= 0 {
		opts.RetryDelay = 250 * time.Millisecond
	}
	if opts.Clock == nil {
		opts.Clock = clock.NewReal()
	}
	base := strings.TrimRight(opts.URL, "/")
	p := &pusher{opts: opts, base: base, board: src.BoardKey()}
	sessions, err := src.Sessions(ctx)
	if err != nil {
		return sum, err
	}
	ids := make([]string, len(sessions))
	for i, s := range sessions {
		ids[i] = s.ID
	}
	var marks map[string]int64
	err = p.retry(ctx, &sum, func() error {
		var e error
		marks, e = p.marks(ctx, ids)
		return e
	})
	if err != nil {
		return sum, err
	}
	var total int64
	for _, s := range sessions {
		if s.Last > marks[s.ID] {
			total += s.Last - marks[s.ID]
			sum.Sessions++
		}
	}
	prog := opts.Progress
	if opts.NewProgress != nil {
		prog = opts.NewProgress(total)
	}
	if prog == nil {
		prog = silent{}
	}
	defer prog.Finish()
	for _, s := range sessions {
		after := marks[s.ID]
		failures := 0
		var ahead chan prepared // the next batch, read and encoded while this one is sent
		for after < s.Last {
			var pb prepared
			if ahead != nil {
				pb = <-ahead
				ahead = nil
				if pb.err == nil && pb.b != nil && pb.b.First() != after+1 {
					pb = prepare(ctx, src, s.ID, after, opts.BatchSize)
				}
			} else {
				pb = prepare(ctx, src, s.ID, after, opts.BatchSize)
			}
			if pb.err != nil {
				return sum, pb.err
			}
			b := pb.b
			if b == nil {
				break
			}
			if b.Last() < s.Last {
				ahead = make(chan prepared, 1)
				go func(after int64) { ahead <- prepare(ctx, src, s.ID, after, opts.BatchSize) }(b.Last())
			}
			var resp BatchResponse
			err := p.postRaw(ctx, "/v1/batch", pb.data, &resp)
			if err == nil {
				sum.Sent += int64(resp.Stored)
				sum.Duplicates += int64(resp.Duplicates)
				prog.Add(resp.Stored)
				after, failures = resp.High, 0
				continue
			}
			if ahead != nil {
				<-ahead // let the reader finish before asking again
				ahead = nil
			}
			var re *RefusedError
			if errors.As(err, &re) && re.Status == http.StatusForbidden || ctx.Err() != nil {
				return sum, fmt.Errorf("push session %s records %d..%d: %w", s.ID, b.First(), b.Last(), err)
			}
			failures++
			sum.Retries++
			if failures >= opts.Retries {
				return sum, fmt.Errorf("push session %s records %d..%d: giving up after %d attempts: %w", s.ID, b.First(), b.Last(), failures, err)
			}
			if err := opts.Clock.Sleep(ctx, opts.RetryDelay*time.Duration(failures)); err != nil {
				return sum, err
			}
			// Ask where the workstation stands: the cut batch may or may
			// not have been stored.
			m, err := p.marks(ctx, []string{s.ID})
			if err != nil {
				continue // the next attempt at sending will tell
			}
			if m[s.ID] > after {
				prog.Add(int(m[s.ID] - after))
				sum.Sent += m[s.ID] - after
			}
			after = m[s.ID]
		}
	}
	return sum, nil
}

type pusher struct {
	opts  PushOptions
	base  string
	board string
}

func (p *pusher) retry(ctx context.Context, sum *PushSummary, f func() error) error {
	for i := 1; ; i++ {
		err := f()
		if err == nil {
			return nil
		}
		var re *RefusedError
		if errors.As(err, &re) && re.Status != http.StatusConflict || i >= p.opts.Retries || ctx.Err() != nil {
			return err
		}
		sum.Retries++
		if err := p.opts.Clock.Sleep(ctx, p.opts.RetryDelay*time.Duration(i)); err != nil {
			return err
		}
	}
}

func (p *pusher) marks(ctx context.Context, ids []string) (map[string]int64, error) {
	var resp MarksResponse
	if err := p.post(ctx, "/v1/marks", MarksRequest{Board: p.board, Sessions: ids}, &resp); err != nil {
		return nil, err
	}
	return resp.Marks, nil
}

// prepared is a batch read from the journal and encoded.
type prepared struct {
	b    *journal.Batch
	data []byte
	err  error
}

func prepare(ctx context.Context, src Source, session string, after int64, n int) prepared {
	b, err := src.NextBatch(ctx, session, after, n)
	if err != nil || b == nil {
		return prepared{err: err}
	}
	return prepared{b: b, data: b.EncodeJSON()}
}

func (p *pusher) post(ctx context.Context, path string, body, out any) error {
	data, err := json.Marshal(body)
	if err != nil {
		return err
	}
	return p.postRaw(ctx, path, data, out)
}

func (p *pusher) postRaw(ctx context.Context, path string, data []byte, out any) error {
	req, err := http.NewRequestWithContext(ctx, http.MethodPost, p.base+path, bytes.NewReader(data))
	if err != nil {
		return fmt.Errorf("workstation URL %q: %w", p.base, err)
	}
	req.Header.Set("Content-Type", "application/json")
	resp, err := p.opts.Client.Do(req)
	if err != nil {
		return fmt.Errorf("POST %s%s: %w", p.base, path, err)
	}
	defer resp.Body.Close()
	rb, err := io.ReadAll(io.LimitReader(resp.Body, MaxBody))
	if err != nil {
		return fmt.Errorf("POST %s%s: reading the answer: %w", p.base, path, err)
	}
	if resp.StatusCode != http.StatusOK {
		var r Refusal
		if json.Unmarshal(rb, &r) != nil || r.Reason == "" {
			r = Refusal{Error: "http", Reason: strings.TrimSpace(string(rb))}
		}
		return &RefusedError{Status: resp.StatusCode, Refusal: r}
	}
	if err := json.Unmarshal(rb, out); err != nil {
		return fmt.Errorf("POST %s%s: answer is not the expected JSON: %w", p.base, path, err)
	}
	return nil
}

// ClientWithCA returns an HTTP client that trusts the PEM certificates in
// caFile (for a workstation with its own certificate authority).
func ClientWithCA(caFile string) (*http.Client, error) {
	pem, err := os.ReadFile(caFile)
	if err != nil {
		return nil, fmt.Errorf("CA file: %w", err)
	}
	pool := x509.NewCertPool()
	if !pool.AppendCertsFromPEM(pem) {
		return nil, fmt.Errorf("CA file %s: no PEM certificate found", caFile)
	}
	return &http.Client{Timeout: 60 * time.Second, Transport: &http.Transport{
		TLSClientConfig: &tls.Config{RootCAs: pool, MinVersion: tls.VersionTLS12}}}, nil
}
