package report

import (
	"os"
	"testing"
	"time"
)

func TestRenderScratch(t *testing.T) {
	r, err := Build(sampleSession())
	if err != nil {
		t.Fatal(err)
	}
	r.AttachHistory(sampleHistory(7, 180, -4.5), 0)
	f, _ := os.Create("/tmp/h6/sample.html")
	defer f.Close()
	if err := r.WriteHTML(f, Options{Generated: time.Date(2026, 11, 20, 8, 0, 0, 0, time.UTC)}); err != nil {
		t.Fatal(err)
	}
}

func TestRenderScratchPDF(t *testing.T) {
	r, err := Build(sampleSession())
	if err != nil {
		t.Fatal(err)
	}
	r.AttachHistory(sampleHistory(7, 180, -4.5), 0)
	f, _ := os.Create("/tmp/h6/sample.pdf")
	defer f.Close()
	if err := r.WritePDF(f, Options{Generated: time.Date(2026, 11, 20, 8, 0, 0, 0, time.UTC)}); err != nil {
		t.Fatal(err)
	}
}
