package report

import (
	"bytes"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
)

// TestPDFKeepsWordsWhole reads the rendered PDF back with an outside
// tool, poppler's pdftotext, and checks that the words a cell must never
// break (certificate numbers, serials, hashes, the "Verdict" header, a
// value with its uncertainty) come back whole on one line. It needs
// pdftotext (Debian poppler-utils); it is skipped without it unless
// KERMALUX_REQUIRE_POPPLER is set, as CI sets it.
func TestPDFKeepsWordsWhole(t *testing.T) {
	tool, err := exec.LookPath("pdftotext")
	if err != nil {
		if os.Getenv("KERMALUX_REQUIRE_POPPLER") != "" {
			t.Fatalf("pdftotext not found and KERMALUX_REQUIRE_POPPLER is set: %v", err)
		}
		t.Skip("pdftotext (poppler-utils) not installed")
	}
	r, err := Build(signingSession(t))
	if err != nil {
		t.Fatal(err)
	}
	r.AttachHistory(sampleHistory(7, 180, -4.5), 0.5)
	var b bytes.Buffer
	if err := r.WritePDF(&b, fixedOpts); err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	pdf := filepath.Join(dir, "r.pdf")
	if err := os.WriteFile(pdf, b.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	out, err := exec.Command(tool, "-layout", pdf, "-").Output()
	if err != nil {
		t.Fatalf("pdftotext: %v", err)
	}
	text := string(out)
	for _, c := range sampleCerts() {
		for _, w := range []string{c.ID, c.Serial, abbrevHex(c.SHA256)} {
			if !strings.Contains(text, w) {
				t.Errorf("%q is broken or missing in the PDF text", w)
			}
		}
	}
	for _, w := range []string{"Verdict", "152.0\u00a0±\u00a05.3", "FL7-0042", "HF80-1311", "RT12-7730", "NOT MEASURED"} {
		if !strings.Contains(text, w) && !strings.Contains(text, strings.ReplaceAll(w, "\u00a0", " ")) {
			t.Errorf("%q is broken or missing in the PDF text", w)
		}
	}
	// No line of the results table may end inside a number ("U = /
	// 0.009027"): a line ending in "±" or "=" was broken.
	if m := regexp.MustCompile(`(?m)[±=]\s*$`).FindString(text); m != "" {
		t.Errorf("a cell breaks after %q", strings.TrimSpace(m))
	}
}
