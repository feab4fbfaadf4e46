package transfer

import (
	"bufio"
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"time"

	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/store"
)

// BundleFormat names the bundle encoding (first line's "format").
const BundleFormat = "kermalux-bundle-1"

// maxLine bounds one line of a bundle (one batch).
const maxLine = MaxBody

// bundleHeader is a bundle's first line.
type bundleHeader struct {
	Format  string `json:"format"`
	Board   string `json:"board"`
	Created string `json:"created"`
}

// bundleEnd is a bundle's last line.
type bundleEnd struct {
	End struct {
		Batches int    `json:"batches"`
		Records int64  `json:"records"`
		Sig     string `json:"sig"`
	} `json:"end"`
}

// digestOf is what the closing signature covers: SHA-256 over the header
// line, a newline, each batch's signature (hex) and a newline, then
// "<batches> <records>\n".
func digestOf(header []byte, sigs []string, records int64) []byte {
	h := sha256.New()
	h.Write(header)
	h.Write([]byte{'\n'})
	for _, s := range sigs {
		h.Write([]byte(s))
		h.Write([]byte{'\n'})
	}
	fmt.Fprintf(h, "%d %d\n", len(sigs), records)
	return h.Sum(nil)
}

// BundleSource is what writing a bundle reads from the board journal.
type BundleSource interface {
	Source
	SignBundle(digest []byte) []byte
}

// BundleSummary says what a bundle holds.
type BundleSummary struct {
	Sessions int
	Batches  int
	Records  int64
}

// WriteBundle writes every record of the journal to w as a bundle: a
// header line, one signed batch per line, and a closing line signed over
// all of them, so a removed, added or reordered batch is detected.
func WriteBundle(ctx context.Context, src BundleSource, w io.Writer, batchSize int, newProgress func(total int64) Progress) (BundleSummary, error) {
	var sum BundleSummary
	if batchSize <= 0 {
		batchSize = 500
	}
	sessions, err := src.Sessions(ctx)
	if err != nil {
		return sum, err
	}
	var total int64
	for _, s := range sessions {
		total += s.Last
	}
	prog := Progress(silent{})
	if newProgress != nil {
		prog = newProgress(total)
	}
	defer prog.Finish()
	bw := bufio.NewWriter(w)
	header, _ := json.Marshal(bundleHeader{Format: BundleFormat, Board: src.BoardKey(), Created: time.Now().UTC().Format(time.RFC3339)})
	bw.Write(header)
	bw.WriteByte('\n')
	var sigs []string
	for _, s := range sessions {
		sum.Sessions++
		for after := int64(0); after < s.Last; {
			b, err := src.NextBatch(ctx, s.ID, after, batchSize)
			if err != nil {
				return sum, err
			}
			if b == nil {
				break
			}
			bw.Write(b.EncodeJSON())
			if err := bw.WriteByte('\n'); err != nil {
				return sum, fmt.Errorf("write bundle: %w", err)
			}
			sigs = append(sigs, b.Sig)
			sum.Records += int64(len(b.Records))
			prog.Add(len(b.Records))
			after = b.Last()
		}
	}
	sum.Batches = len(sigs)
	var end bundleEnd
	end.End.Batches, end.End.Records = len(sigs), sum.Records
	end.End.Sig = hex.EncodeToString(src.SignBundle(digestOf(header, sigs, sum.Records)))
	last, _ := json.Marshal(end)
	bw.Write(last)
	bw.WriteByte('\n')
	if err := bw.Flush(); err != nil {
		return sum, fmt.Errorf("write bundle: %w", err)
	}
	return sum, nil
}

// Bundle is a decoded, signature-checked bundle.
type Bundle struct {
	Board   string
	Created string
	Batches []*journal.Batch
	Lines   []int // line of each batch in the file
	Records int64
}

// ReadBundle decodes a bundle and checks its structure, its closing
// signature and every batch's signature and chain against the board key in
// its header. name is used in errors ("name line N: ..."). Whether the
// board is enrolled is the store's to decide (Import).
func ReadBundle(r io.Reader, name string) (*Bundle, error) {
	br := bufio.NewReaderSize(r, 1<<20)
	lineNo := 0
	cut := false // the last line read had no newline
	next := func() ([]byte, error) {
		var buf []byte
		for {
			chunk, err := br.ReadSlice('\n')
			buf = append(buf, chunk...)
			if len(buf) > maxLine {
				return nil, fmt.Errorf("%s line %d: longer than %d bytes", name, lineNo+1, maxLine)
			}
			if errors.Is(err, bufio.ErrBufferFull) {
				continue
			}
			if err != nil && !(errors.Is(err, io.EOF) && len(buf) > 0) {
				return nil, err
			}
			lineNo++
			cut = !bytes.HasSuffix(buf, []byte{'\n'})
			return bytes.TrimRight(buf, "\r\n"), nil
		}
	}
	header, err := next()
	if err != nil {
		return nil, fmt.Errorf("%s: empty file, expected a bundle header line", name)
	}
	var h bundleHeader
	if err := json.Unmarshal(header, &h); err != nil || h.Format != BundleFormat {
		return nil, fmt.Errorf("%s line 1: not a kermalux bundle (expected {\"format\":%q,...})", name, BundleFormat)
	}
	pub, err := journal.ParsePublicKey(h.Board)
	if err != nil {
		return nil, fmt.Errorf("%s line 1: %w", name, err)
	}
	bun := &Bundle{Board: h.Board, Created: h.Created}
	var sigs []string
	for {
		line, err := next()
		if errors.Is(err, io.EOF) {
			return nil, fmt.Errorf("%s: ends at line %d without the closing line: the file is truncated (copy it again)", name, lineNo)
		}
		if err != nil {
			return nil, fmt.Errorf("%s line %d: %w", name, lineNo+1, err)
		}
		if bytes.HasPrefix(line, []byte(`{"end":`)) {
			var e bundleEnd
			if err := json.Unmarshal(line, &e); err != nil {
				if cut {
					return nil, fmt.Errorf("%s line %d: the closing line is cut short: the file is truncated (copy it again)", name, lineNo)
				}
				return nil, fmt.Errorf("%s line %d: closing line: %w", name, lineNo, err)
			}
			if e.End.Batches != len(sigs) || e.End.Records != bun.Records {
				return nil, fmt.Errorf("%s line %d: closing line counts %d batches and %d records, the file holds %d and %d (batches removed or added)",
					name, lineNo, e.End.Batches, e.End.Records, len(sigs), bun.Records)
			}
			sig, err := hex.DecodeString(e.End.Sig)
			if err != nil || !journal.CheckBundleSig(pub, digestOf(header, sigs, bun.Records), sig) {
				return nil, fmt.Errorf("%s line %d: the bundle signature does not verify with board key %s (lines were changed, removed or reordered)", name, lineNo, h.Board[:16])
			}
			if _, err := next(); !errors.Is(err, io.EOF) {
				return nil, fmt.Errorf("%s line %d: data after the closing line", name, lineNo)
			}
			return bun, nil
		}
		b, err := DecodeBatch(line)
		if err != nil {
			if cut {
				return nil, fmt.Errorf("%s line %d is cut short: the file is truncated (copy it again): %w", name, lineNo, err)
			}
			return nil, fmt.Errorf("%s line %d: %w", name, lineNo, err)
		}
		if b.Board != h.Board {
			return nil, fmt.Errorf("%s line %d: batch signed by board %s inside a bundle of board %s", name, lineNo, b.Board[:16], h.Board[:16])
		}
		if err := b.Check(pub); err != nil {
			return nil, fmt.Errorf("%s line %d: %w", name, lineNo, err)
		}
		sigs = append(sigs, b.Sig)
		bun.Batches = append(bun.Batches, b)
		bun.Lines = append(bun.Lines, lineNo)
		bun.Records += int64(len(b.Records))
	}
}

// ImportSummary says what an import stored.
type ImportSummary struct {
	Batches    int
	Stored     int
	Duplicates int
}

func (s ImportSummary) String() string {
	return fmt.Sprintf("imported %d new records from %d batches (%d already stored)", s.Stored, s.Batches, s.Duplicates)
}

// Import applies a bundle to the store in one transaction: every batch
// passes the same checks as a push (board enrolled, signatures, chain
// continuity with what is stored) or nothing of the bundle is stored.
// Batches already wholly stored are counted as duplicates: importing the
// same bundle twice stores nothing new.
func Import(ctx context.Context, st *store.Store, b *Bundle, name string, prog Progress) (ImportSummary, error) {
	if prog == nil {
		prog = silent{}
	}
	defer prog.Finish()
	a, err := st.ApplyAll(ctx, b.Batches, store.ApplyOptions{SkipReplays: true, Progress: prog.Add})
	if err != nil {
		var be *store.BatchError
		if errors.As(err, &be) && be.Index < len(b.Lines) {
			return ImportSummary{}, fmt.Errorf("%s line %d: %w (nothing from this bundle was stored)", name, b.Lines[be.Index], be.Err)
		}
		return ImportSummary{}, fmt.Errorf("%s: %w (nothing from this bundle was stored)", name, err)
	}
	return ImportSummary{Batches: len(b.Batches), Stored: a.Stored, Duplicates: a.Duplicates}, nil
}
