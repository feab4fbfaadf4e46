package report

import (
	"os"
	"path/filepath"
	"testing"
)

// TestPreview writes the sample report (HTML, PDF, CSV) into the directory
// named by KERMALUX_REPORT_PREVIEW, for looking at it in a browser or a
// PDF viewer. Skipped unless the variable is set.
func TestPreview(t *testing.T) {
	dir := os.Getenv("KERMALUX_REPORT_PREVIEW")
	if dir == "" {
		t.Skip("set KERMALUX_REPORT_PREVIEW=DIR to write the sample report there")
	}
	r := sampleReport(t)
	r.AttachHistory(sampleHistory(7, 180, -4.5), 0)
	paths, err := r.WriteFiles(filepath.Clean(dir), Formats, fixedOpts)
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range paths {
		t.Log(p)
	}
	// A board journal and a workstation store holding seven yearly
	// sessions of HV-2291 and two other intensifiers, for trying the
	// report and trend commands.
	t.Log(buildStore(t, filepath.Clean(dir), 3, 7))
}
