// Package push is the board's side of sync: it sends the journal's new
// records to a workstation's receiver over HTTP, or writes them to a
// bundle file, in the wire format. It links no store and no server.
package push

import (
	"bufio"
	"bytes"
	"context"
	"crypto/ed25519"
	"crypto/tls"
	"crypto/x509"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"net/url"
	"os"
	"strings"
	"time"

	"kermalux/drivers/clock"
	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/transfer"
	"kermalux/firmware-host/journal/transfer/wire"
)

// Source is the part of the board journal a push or a bundle reads.
type Source interface {
	BoardKey() string
	PublicKey() ed25519.PublicKey
	Sign(msg []byte) []byte
	Sessions(ctx context.Context) ([]journal.SessionSummary, error)
	Records(ctx context.Context, session string, after int64, limit int) ([]journal.Record, error)
}

// DefaultSegment is the records per signed segment: large enough that the
// signature and the frame cost nothing per record, small enough that a
// receiver holds little and a cut loses little.
const DefaultSegment = 1000

// Options configure Push.
type Options struct {
	URL         string       // base URL of the receiving workstation, e.g. https://office:8470
	Client      *http.Client // default: no overall timeout (a slow link may take long), 30 s to connect
	SegmentSize int          // records per segment; default DefaultSegment
	Retries     int          // attempts in a row without progress before giving up; default 8
	RetryDelay  time.Duration
	Clock       clock.Clock // for waits between retries; default real
	Progress    transfer.Progress
	// NewProgress, if set, is called once the total is known.
	NewProgress func(total int64) transfer.Progress
}

// Summary says what a push did.
type Summary struct {
	Sessions   int           // sessions with records to send
	Sent       int64         // records the workstation stored
	Duplicates int64         // records it already had
	Retries    int           // failed attempts recovered from
	WireBytes  int64         // bytes of stream sent, all attempts
	Elapsed    time.Duration // real time taken
}

func (s Summary) String() string {
	return fmt.Sprintf("pushed %d records of %d sessions (%d already there, %d retries, %d bytes sent) in %s",
		s.Sent, s.Sessions, s.Duplicates, s.Retries, s.WireBytes, s.Elapsed.Round(time.Millisecond))
}

// RefusedError is a refusal from the workstation that retrying cannot fix.
type RefusedError struct {
	Status int
	wire.Refusal
}

func (e *RefusedError) Error() string {
	return fmt.Sprintf("workstation refused (HTTP %d %s): %s", e.Status, e.Refusal.Error, e.Reason)
}

// ErrFork means the journal and the store disagree about a session's
// records up to the store's mark: one of them holds another branch.
var ErrFork = errors.New("fork")

// PlainHTTP reports whether rawURL sends without TLS: the signatures keep
// the records' integrity and origin, not their privacy.
func PlainHTTP(rawURL string) bool {
	u, err := url.Parse(rawURL)
	return err == nil && strings.EqualFold(u.Scheme, "http")
}

// Push sends every record the workstation does not have yet in one
// stream of signed segments, each stored by the workstation as it
// arrives. It resumes after any interruption (a cut connection, a
// workstation restart): it asks for the marks again and sends from there,
// so each record ends up stored once. Before sending it compares the hash
// of the journal's record at each mark with the store's head and refuses
// a fork, naming both heads.
func Push(ctx context.Context, src Source, opts Options) (sum Summary, err error) {
	start := time.Now()
	defer func() { sum.Elapsed = time.Since(start) }()
	if opts.Client == nil {
		opts.Client = DefaultClient(nil)
	}
	if opts.SegmentSize <= 0 {
		opts.SegmentSize = DefaultSegment
	}
	opts.SegmentSize = min(opts.SegmentSize, wire.MaxSegmentRecords)
	if opts.Retries <= 0 {
		opts.Retries = 8
	}
	if opts.RetryDelay <= 0 {
		opts.RetryDelay = 250 * time.Millisecond
	}
	if opts.Clock == nil {
		opts.Clock = clock.NewReal()
	}
	p := &pusher{opts: opts, base: strings.TrimRight(opts.URL, "/"), src: src}
	sessions, err := src.Sessions(ctx)
	if err != nil {
		return sum, err
	}
	ids := make([]string, len(sessions))
	for i, s := range sessions {
		ids[i] = s.ID
	}
	var marks wire.MarksResponse
	for failures := 0; ; {
		marks, err = p.marks(ctx, ids)
		if err == nil {
			break
		}
		if failures++; !retryable(err) || failures >= opts.Retries || ctx.Err() != nil {
			return sum, err
		}
		sum.Retries++
		if err := opts.Clock.Sleep(ctx, opts.RetryDelay*time.Duration(failures)); err != nil {
			return sum, err
		}
	}
	var total int64
	for _, s := range sessions {
		m := marks.Marks[s.ID]
		if err := p.checkFork(ctx, s, m); err != nil {
			return sum, err
		}
		if s.Last > m.Seq {
			total += s.Last - m.Seq
			sum.Sessions++
		}
	}
	prog := opts.Progress
	if opts.NewProgress != nil {
		prog = opts.NewProgress(total)
	}
	if prog == nil {
		prog = transfer.Silent{}
	}
	defer prog.Finish()
	for failures := 0; ; {
		pending := pendingOf(sessions, marks.Marks)
		if len(pending) == 0 {
			return sum, nil
		}
		resp, n, err := p.send(ctx, marks.Store, pending, marks.Marks)
		sum.WireBytes += n
		if err == nil {
			progressed := false
			for _, s := range pending {
				high, ok := resp.High[s.ID]
				if !ok {
					continue
				}
				if high > s.Last {
					return sum, fmt.Errorf("push to %s: the workstation's answer says it holds record %d of session %s, the journal ends at record %d", p.base, high, s.ID, s.Last)
				}
				if err := p.checkBack(s.ID, high, marks.Marks[s.ID].Seq); err != nil {
					return sum, err
				}
				if m := marks.Marks[s.ID]; high > m.Seq {
					sum.Sent += high - m.Seq
					prog.Add(int(high - m.Seq))
					marks.Marks[s.ID] = wire.Mark{Seq: high}
					progressed = true
				}
			}
			sum.Duplicates += max(resp.Duplicates, 0)
			if progressed {
				failures = 0
				continue
			}
			// A 200 that stores nothing of what was sent (an empty
			// answer, a proxy's page) is no progress: sending again
			// and again would never end.
			err = fmt.Errorf("the workstation answered 200 but holds none of the %d sessions' new records", len(pending))
		}
		if !retryable(err) || ctx.Err() != nil {
			return sum, fmt.Errorf("push to %s: %w", p.base, err)
		}
		sum.Retries++
		failures++
		if failures >= opts.Retries {
			return sum, fmt.Errorf("push to %s: giving up after %d attempts without progress: %w", p.base, failures, err)
		}
		if err := opts.Clock.Sleep(ctx, opts.RetryDelay*time.Duration(failures)); err != nil {
			return sum, err
		}
		// Ask where the workstation stands: segments of the cut stream
		// may or may not have been stored.
		m, err := p.marks(ctx, pendingIDs(pending))
		if err != nil {
			continue // the next attempt at sending will tell
		}
		for _, s := range pending {
			nm, ok := m.Marks[s.ID]
			if !ok {
				continue
			}
			if err := p.checkFork(ctx, s, nm); err != nil {
				return sum, err
			}
			if err := p.checkBack(s.ID, nm.Seq, marks.Marks[s.ID].Seq); err != nil {
				return sum, err
			}
			if old := marks.Marks[s.ID]; nm.Seq > old.Seq {
				sum.Sent += nm.Seq - old.Seq
				prog.Add(int(nm.Seq - old.Seq))
				failures = 0
			}
			marks.Marks[s.ID] = nm
		}
	}
}

// ErrStoreLost: the workstation now says it holds less of a session than
// it acknowledged earlier in the same push (a store restored from an older
// backup or rolled back, a proxy answering for another): pushing again
// would go round for ever, and records it acknowledged are gone there.
var ErrStoreLost = errors.New("the workstation lost records it had acknowledged")

// checkBack refuses an answer that puts the workstation's copy of session
// below what it acknowledged before (acked): the board's view of what the
// store holds only grows within a push.
func (p *pusher) checkBack(session string, seq, acked int64) error {
	if seq < acked {
		return fmt.Errorf("push to %s: %w: it acknowledged record %d of session %s, and now says it holds up to record %d; ask the workstation's keeper to check its store", p.base, ErrStoreLost, acked, session, seq)
	}
	return nil
}

func retryable(err error) bool {
	var re *RefusedError
	if errors.As(err, &re) {
		return re.Status != http.StatusForbidden && re.Status != http.StatusBadRequest || re.Refusal.Error == "malformed"
	}
	return !errors.Is(err, ErrFork) && !errors.Is(err, ErrStoreLost)
}

func pendingOf(sessions []journal.SessionSummary, marks map[string]wire.Mark) []journal.SessionSummary {
	var out []journal.SessionSummary
	for _, s := range sessions {
		if s.Last > marks[s.ID].Seq {
			out = append(out, s)
		}
	}
	return out
}

func pendingIDs(ss []journal.SessionSummary) []string {
	ids := make([]string, len(ss))
	for i, s := range ss {
		ids[i] = s.ID
	}
	return ids
}

type pusher struct {
	opts Options
	base string
	src  Source
}

// checkFork compares the journal's record at the store's mark with the
// store's head: a journal that ends below the mark, or whose record there
// hashes otherwise, is another branch of the session.
func (p *pusher) checkFork(ctx context.Context, s journal.SessionSummary, m wire.Mark) error {
	if m.Seq == 0 {
		return nil
	}
	if s.Last < m.Seq {
		recs, err := p.src.Records(ctx, s.ID, s.Last-1, 1)
		if err != nil {
			return err
		}
		head := journal.ZeroHash()
		if len(recs) == 1 {
			head = recs[0].Hash
		}
		return fmt.Errorf("%w in session %s: the store holds records up to %d (head %s), the journal ends at record %d (head %s): the journal lost records or is another copy; nothing sent",
			ErrFork, s.ID, m.Seq, short(m.Head), s.Last, short(head))
	}
	recs, err := p.src.Records(ctx, s.ID, m.Seq-1, 1)
	if err != nil {
		return err
	}
	if len(recs) != 1 || recs[0].Hash != m.Head {
		mine := "(missing)"
		if len(recs) == 1 {
			mine = recs[0].Hash
		}
		return fmt.Errorf("%w in session %s at record %d: the store's head is %s, the journal's record %d is %s: the journal is another branch; nothing sent",
			ErrFork, s.ID, m.Seq, short(m.Head), m.Seq, short(mine))
	}
	return nil
}

func (p *pusher) marks(ctx context.Context, ids []string) (wire.MarksResponse, error) {
	var out wire.MarksResponse
	out.Marks = map[string]wire.Mark{}
	for len(ids) > 0 {
		n := min(len(ids), wire.MaxMarksSessions)
		body, _ := json.Marshal(wire.MarksRequest{Board: p.src.BoardKey(), Sessions: ids[:n]})
		var resp wire.MarksResponse
		if err := p.post(ctx, wire.PathMarks, "application/json", bytes.NewReader(body), &resp); err != nil {
			return out, err
		}
		out.Store = resp.Store
		for _, id := range ids[:n] {
			m, ok := resp.Marks[id]
			if !ok {
				continue // not stored yet: mark 0
			}
			if m.Seq < 0 {
				return out, fmt.Errorf("POST %s%s: the answer gives session %s the mark %d: a mark is a record's number, 0 or more", p.base, wire.PathMarks, id, m.Seq)
			}
			out.Marks[id] = m
		}
		ids = ids[n:]
	}
	return out, nil
}

// countingWriter counts the bytes that go into the request body.
type countingWriter struct {
	w io.Writer
	n int64
}

func (c *countingWriter) Write(b []byte) (int, error) {
	n, err := c.w.Write(b)
	c.n += int64(n)
	return n, err
}

// send streams every pending session from its mark in one request.
func (p *pusher) send(ctx context.Context, audience string, pending []journal.SessionSummary, marks map[string]wire.Mark) (wire.PushResponse, int64, error) {
	pr, pw := io.Pipe()
	cw := &countingWriter{w: pw}
	done := make(chan error, 1)
	go func() {
		err := p.stream(ctx, cw, audience, pending, marks)
		pw.CloseWithError(err)
		done <- err
	}()
	var resp wire.PushResponse
	err := p.post(ctx, wire.PathPush, wire.ContentType, pr, &resp)
	pr.CloseWithError(errors.New("request ended"))
	if werr := <-done; werr != nil && err == nil {
		err = werr
	}
	return resp, cw.n, err
}

// stream writes every pending session from its mark. The journal is read
// one segment ahead in a goroutine, so that reading the next segment and
// compressing this one share the cores (at most three segments in memory:
// one being read, one waiting, one being written).
func (p *pusher) stream(ctx context.Context, w io.Writer, audience string, pending []journal.SessionSummary, marks map[string]wire.Mark) error {
	bw := bufio.NewWriterSize(w, 32<<10)
	sw, err := wire.NewWriter(bw, wire.KindPush, audience, p.src)
	if err != nil {
		return err
	}
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	batches, rerr := p.read(ctx, pending, marks)
	for recs := range batches {
		if err := sw.Segment(recs); err != nil {
			return err
		}
		if err := bw.Flush(); err != nil {
			return err
		}
	}
	if err := <-rerr; err != nil {
		return err
	}
	if err := sw.Close(); err != nil {
		return err
	}
	return bw.Flush()
}

// read sends the pending records, a segment's worth at a time, then nil
// (or the error that stopped it) on the error channel.
func (p *pusher) read(ctx context.Context, pending []journal.SessionSummary, marks map[string]wire.Mark) (<-chan []journal.Record, <-chan error) {
	out := make(chan []journal.Record, 1)
	rerr := make(chan error, 1)
	go func() {
		defer close(out)
		for _, s := range pending {
			for after := marks[s.ID].Seq; after < s.Last; {
				recs, err := p.src.Records(ctx, s.ID, after, p.opts.SegmentSize)
				if err != nil {
					rerr <- err
					return
				}
				if len(recs) == 0 {
					break
				}
				select {
				case out <- recs:
				case <-ctx.Done():
					rerr <- ctx.Err()
					return
				}
				after = recs[len(recs)-1].Seq
			}
		}
		rerr <- nil
	}()
	return out, rerr
}

func (p *pusher) post(ctx context.Context, path, ctype string, body io.Reader, out any) error {
	req, err := http.NewRequestWithContext(ctx, http.MethodPost, p.base+path, body)
	if err != nil {
		return fmt.Errorf("workstation URL %q: %w", p.base, err)
	}
	req.Header.Set("Content-Type", ctype)
	resp, err := p.opts.Client.Do(req)
	if err != nil {
		return fmt.Errorf("POST %s%s: %w", p.base, path, err)
	}
	defer resp.Body.Close()
	rb, err := io.ReadAll(io.LimitReader(resp.Body, 16<<20))
	if err != nil {
		return fmt.Errorf("POST %s%s: reading the answer: %w", p.base, path, err)
	}
	if resp.StatusCode != http.StatusOK {
		var r wire.Refusal
		if json.Unmarshal(rb, &r) != nil || r.Reason == "" {
			r = wire.Refusal{Error: "http", Reason: strings.TrimSpace(string(rb))}
		}
		return &RefusedError{Status: resp.StatusCode, Refusal: r}
	}
	if err := json.Unmarshal(rb, out); err != nil {
		return fmt.Errorf("POST %s%s: answer is not the expected JSON: %w", p.base, path, err)
	}
	return nil
}

// DefaultClient is the push client: no overall timeout (a long session
// over a slow mobile link takes minutes), but bounded waits to connect and
// for the answer's headers. tlsConf may be nil.
func DefaultClient(tlsConf *tls.Config) *http.Client {
	return &http.Client{Transport: &http.Transport{
		Proxy:                 http.ProxyFromEnvironment,
		TLSClientConfig:       tlsConf,
		TLSHandshakeTimeout:   30 * time.Second,
		ResponseHeaderTimeout: 10 * time.Minute,
		IdleConnTimeout:       90 * time.Second,
	}}
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
	return DefaultClient(&tls.Config{RootCAs: pool, MinVersion: tls.VersionTLS12}), nil
}

// BundleSummary says what a bundle holds.
type BundleSummary struct {
	Sessions int
	Segments int64
	Records  int64
}

// WriteBundle writes every record of the journal to w as a bundle: the
// stream of kind KindBundle, closed by a signature over all its segments
// so that a removed, added or reordered segment is detected. audience ""
// makes a bundle any store of the board's enrolment takes.
func WriteBundle(ctx context.Context, src Source, w io.Writer, audience string, segment int, newProgress func(total int64) transfer.Progress) (BundleSummary, error) {
	var sum BundleSummary
	if segment <= 0 {
		segment = DefaultSegment
	}
	segment = min(segment, wire.MaxSegmentRecords)
	sessions, err := src.Sessions(ctx)
	if err != nil {
		return sum, err
	}
	var total int64
	for _, s := range sessions {
		total += s.Last
	}
	prog := transfer.Progress(transfer.Silent{})
	if newProgress != nil {
		prog = newProgress(total)
	}
	defer prog.Finish()
	bw := bufio.NewWriterSize(w, 64<<10)
	sw, err := wire.NewWriter(bw, wire.KindBundle, audience, src)
	if err != nil {
		return sum, err
	}
	for _, s := range sessions {
		sum.Sessions++
		for after := int64(0); after < s.Last; {
			recs, err := src.Records(ctx, s.ID, after, segment)
			if err != nil {
				return sum, err
			}
			if len(recs) == 0 {
				break
			}
			if err := sw.Segment(recs); err != nil {
				return sum, err
			}
			prog.Add(len(recs))
			after = recs[len(recs)-1].Seq
		}
	}
	if err := sw.Close(); err != nil {
		return sum, err
	}
	sum.Segments, sum.Records = sw.Counts()
	if err := bw.Flush(); err != nil {
		return sum, fmt.Errorf("write bundle: %w", err)
	}
	return sum, nil
}

func short(h string) string {
	if len(h) > 12 {
		return h[:12] + "…"
	}
	return h
}
