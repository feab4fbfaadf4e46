package report

import (
	"bytes"
	"compress/zlib"
	"io"
	"regexp"
	"strconv"
	"testing"
	"unicode/utf16"
)

var (
	pdfPage   = regexp.MustCompile(`/Type /Page\b[^s]`)
	pdfCount  = regexp.MustCompile(`/Type /Pages[^>]*?/Count (\d+)`)
	pdfImage  = regexp.MustCompile(`/Subtype /Image`)
	pdfStream = regexp.MustCompile(`(?s)stream\r?\n(.*?)\r?\nendstream`)
)

// utf16BE encodes s as a PDF text string in UTF-16BE with its byte order
// mark (ISO 32000-1 7.9.2.2).
func utf16BE(s string) []byte {
	out := []byte{0xfe, 0xff}
	for _, u := range utf16.Encode([]rune(s)) {
		out = append(out, byte(u>>8), byte(u))
	}
	return out
}

// TestPDFParses checks the PDF's structure (ISO 32000-1): header, trailer,
// a page tree whose /Count matches its page objects, one image per chart,
// text objects in the content streams and the document title.
func TestPDFParses(t *testing.T) {
	r := sampleReport(t)
	r.AttachHistory(sampleHistory(7, 180, -4.5), 0)
	var b bytes.Buffer
	if err := r.WritePDF(&b, fixedOpts); err != nil {
		t.Fatal(err)
	}
	pdf := b.Bytes()
	if !bytes.HasPrefix(pdf, []byte("%PDF-1.")) {
		t.Fatalf("no PDF header: %q", pdf[:8])
	}
	if !bytes.HasSuffix(bytes.TrimSpace(pdf), []byte("%%EOF")) {
		t.Errorf("no %%%%EOF trailer")
	}
	m := pdfCount.FindSubmatch(pdf)
	if m == nil {
		t.Fatal("no page tree")
	}
	count, _ := strconv.Atoi(string(m[1]))
	pages := len(pdfPage.FindAll(pdf, -1))
	if count != pages || pages < 5 {
		t.Errorf("page tree /Count %d, page objects %d (want equal and at least 5)", count, pages)
	}
	charts, _ := r.Charts()
	if n := len(pdfImage.FindAll(pdf, -1)); n != len(charts) {
		t.Errorf("%d images, want one per chart (%d)", n, len(charts))
	}
	texts := 0
	for _, s := range pdfStream.FindAllSubmatch(pdf, -1) {
		zr, err := zlib.NewReader(bytes.NewReader(s[1]))
		if err != nil {
			continue // not a Flate stream (fonts and images may differ)
		}
		body, err := io.ReadAll(zr)
		if err != nil {
			continue
		}
		texts += bytes.Count(body, []byte("BT "))
	}
	if texts < 200 {
		t.Errorf("%d text objects, want the report's text (at least 200)", texts)
	}
	if !bytes.Contains(pdf, utf16BE("Image intensifier check HV-2291")) {
		t.Errorf("document title missing")
	}
}
