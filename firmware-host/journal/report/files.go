package report

import (
	"bytes"
	"fmt"
	"os"
	"path/filepath"
	"strings"
)

// Formats are the output formats WriteFiles knows.
var Formats = []string{"html", "pdf", "csv"}

// ParseFormats reads a comma-separated list of formats ("html,pdf,csv").
func ParseFormats(s string) ([]string, error) {
	var out []string
	seen := map[string]bool{}
	for _, f := range strings.Split(s, ",") {
		f = strings.ToLower(strings.TrimSpace(f))
		if f == "" || seen[f] {
			continue
		}
		if !contains(Formats, f) {
			return nil, fmt.Errorf("unknown report format %q (known: %s)", f, strings.Join(Formats, ", "))
		}
		seen[f] = true
		out = append(out, f)
	}
	if len(out) == 0 {
		return nil, fmt.Errorf("no report format given (known: %s)", strings.Join(Formats, ", "))
	}
	return out, nil
}

// BaseName is the file name stem of a session's report:
// report-<serial>-<date>-<session id>, made safe for file systems.
func (r *Report) BaseName() string {
	return "report-" + slug(r.Session.IntensifierSerial) + "-" + r.Session.Started.Format("20060102") + "-" + slug(r.Session.ID)
}

// WriteFiles renders the report into dir in each format and returns the
// paths written. Each file is written to a temporary name and renamed, so
// a failed rendering never leaves a half-written report.
func (r *Report) WriteFiles(dir string, formats []string, opt Options) ([]string, error) {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, fmt.Errorf("report directory %s: %w", dir, err)
	}
	base := filepath.Join(dir, r.BaseName())
	var paths []string
	write := func(path string, render func(*bytes.Buffer) error) error {
		var b bytes.Buffer
		if err := render(&b); err != nil {
			return err
		}
		tmp := path + ".part"
		if err := os.WriteFile(tmp, b.Bytes(), 0o644); err != nil {
			return fmt.Errorf("write %s: %w", path, err)
		}
		if err := os.Rename(tmp, path); err != nil {
			os.Remove(tmp)
			return fmt.Errorf("write %s: %w", path, err)
		}
		paths = append(paths, path)
		return nil
	}
	for _, f := range formats {
		var err error
		switch f {
		case "html":
			err = write(base+".html", func(b *bytes.Buffer) error { return r.WriteHTML(b, opt) })
		case "pdf":
			err = write(base+".pdf", func(b *bytes.Buffer) error { return r.WritePDF(b, opt) })
		case "csv":
			if err = write(base+"-results.csv", func(b *bytes.Buffer) error { return r.WriteResultsCSV(b) }); err == nil {
				err = write(base+"-readings.csv", func(b *bytes.Buffer) error { return r.WriteReadingsCSV(b) })
			}
		default:
			err = fmt.Errorf("unknown report format %q (known: %s)", f, strings.Join(Formats, ", "))
		}
		if err != nil {
			return paths, err
		}
	}
	return paths, nil
}
