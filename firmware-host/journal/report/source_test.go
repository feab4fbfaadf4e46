package report

import (
	"bytes"
	"context"
	"encoding/json"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"kermalux/drivers/clock"
	"kermalux/firmware-host/journal"
	"kermalux/procedures/entry"
)

// writeJournal writes the sample session into a real board journal and
// returns its path.
func writeJournal(t *testing.T) string {
	t.Helper()
	dir := t.TempDir()
	path := filepath.Join(dir, "board.journal")
	j, err := journal.Open(path, journal.Options{KeyDir: filepath.Join(dir, "key"), Clock: clock.NewManual(sampleStart), BootID: func() string { return "test-boot" }})
	if err != nil {
		t.Fatal(err)
	}
	defer j.Close()
	ctx := context.Background()
	envs := sampleSession()
	var s entry.Session
	if err := json.Unmarshal(envs[0].Payload, &s); err != nil {
		t.Fatal(err)
	}
	s.BoardKey = ""
	id, err := j.Begin(ctx, s)
	if err != nil {
		t.Fatal(err)
	}
	for _, env := range envs[1:] {
		if _, err := j.Append(ctx, id, env.Kind, env.Payload); err != nil {
			t.Fatalf("append seq %d: %v", env.Seq, err)
		}
	}
	return path
}

func TestJournalFileAndExport(t *testing.T) {
	ctx := context.Background()
	path := writeJournal(t)
	sessions, err := JournalSessions(ctx, path)
	if err != nil {
		t.Fatal(err)
	}
	if len(sessions) != 1 || len(sessions[0]) != len(sampleSession()) {
		t.Fatalf("sessions %d, records %d", len(sessions), len(sessions[0]))
	}
	r, err := Build(sessions[0])
	if err != nil {
		t.Fatal(err)
	}
	want := sampleReport(t)
	if len(r.Results) != len(want.Results) || len(r.Readings) != len(want.Readings) || len(r.SafetyAcks()) != 4 || r.BeamOn != want.BeamOn {
		t.Errorf("report from the journal differs: results %d/%d readings %d/%d safety acks %d beam %g/%g",
			len(r.Results), len(want.Results), len(r.Readings), len(want.Readings), len(r.SafetyAcks()), r.BeamOn, want.BeamOn)
	}

	// The same records as JSON lines (the journal's export format).
	var lines bytes.Buffer
	if err := journal.Export(ctx, path, func(rec journal.Record) error {
		b, err := json.Marshal(rec)
		lines.Write(b)
		lines.WriteByte('\n')
		return err
	}); err != nil {
		t.Fatal(err)
	}
	exported, err := ReadExport(bytes.NewReader(lines.Bytes()), "export.jsonl")
	if err != nil {
		t.Fatal(err)
	}
	if len(exported) != 1 || len(exported[0]) != len(sessions[0]) {
		t.Fatalf("export: %d sessions", len(exported))
	}
	if _, err := PickSession(exported, "no-such-session", "export.jsonl"); err == nil || !strings.Contains(err.Error(), "no-such-session") {
		t.Errorf("unknown session: %v", err)
	}
	if got, err := PickSession(exported, "", "export.jsonl"); err != nil || got[0].Session != sessions[0][0].Session {
		t.Errorf("latest session: %v", err)
	}
}

func TestReadExportErrors(t *testing.T) {
	good := `{"seq":1,"session":"s1","kind":"session","wall":"2026-11-18T09:02:00Z","mono_ns":1,"boot_id":"b","payload":{"id":"s1"},"prev":"","hash":"","sig":""}`
	tests := []struct {
		name, text, want string
	}{
		{"garbage", good + "\n\nnot json\n", "x.jsonl:3:"},
		{"no session", `{"seq":1,"kind":"session","wall":"2026-11-18T09:02:00Z","payload":{}}` + "\n", "x.jsonl:1: record without session"},
		{"bad wall", `{"seq":1,"session":"s","kind":"session","wall":"yesterday","payload":{}}` + "\n", "x.jsonl:1:"},
		{"two values", good + " {}\n", "x.jsonl:1: more than one JSON value"},
		{"empty", "\n\n", "no session to report"},
	}
	for _, tt := range tests {
		_, err := ReadExport(strings.NewReader(tt.text), "x.jsonl")
		if err == nil || !strings.Contains(err.Error(), tt.want) {
			t.Errorf("%s: error %v, want %q", tt.name, err, tt.want)
		}
	}
	if _, err := JournalSessions(context.Background(), filepath.Join(t.TempDir(), "missing.journal")); err == nil || !strings.Contains(err.Error(), "missing.journal") {
		t.Errorf("missing file: %v", err)
	}
}

func FuzzReadExport(f *testing.F) {
	f.Add([]byte(`{"seq":1,"session":"s1","kind":"session","wall":"2026-11-18T09:02:00Z","mono_ns":1,"boot_id":"b","payload":{"id":"s1"}}` + "\n"))
	f.Add([]byte("{}\n{\"seq\":2}\n"))
	f.Add([]byte("\x00\xff"))
	f.Fuzz(func(t *testing.T, data []byte) {
		sessions, err := ReadExport(bytes.NewReader(data), "fuzz.jsonl")
		if err != nil {
			if !strings.HasPrefix(err.Error(), "fuzz.jsonl") {
				t.Fatalf("error does not name the file: %v", err)
			}
			return
		}
		for _, s := range sessions {
			if r, err := Build(s); err == nil {
				var b bytes.Buffer
				if err := r.writeHTML(&b, fixedOpts, noCharts); err != nil {
					t.Fatalf("built report does not render: %v", err)
				}
			}
		}
	})
}

// FuzzBuild feeds damaged payloads to each kind of record: Build, the
// reader of a session's records, either refuses with an error naming the
// record or yields a report whose page model (the values, rows and words
// every rendering is made of) and results CSV are made without a panic or
// an error. An input edits the compact session's record i: it writes
// patch into the payload's JSON text at at, over drop bytes, or, when
// patch is itself a JSON value, replaces the payload with it. Inputs stay
// short (the fuzzer's minimiser runs a number of inputs that grows with
// the square of an input's length) and yet reach every byte of every
// payload. Rendering the page is FuzzRenderHTML's (html/template makes it
// several times slower than reading).
func FuzzBuild(f *testing.F) {
	fuzzEdits(f, func(t *testing.T, r *Report) {
		_ = r.view(fixedOpts, noCharts)
		var b bytes.Buffer
		if err := r.WriteResultsCSV(&b); err != nil {
			t.Fatalf("results CSV: %v", err)
		}
	})
}

// FuzzRenderHTML: every report Build yields from damaged payloads (as
// FuzzBuild makes them) renders as HTML: the template's formatting
// functions see every value the reader let through.
func FuzzRenderHTML(f *testing.F) {
	fuzzEdits(f, func(t *testing.T, r *Report) {
		// Charts are left out: drawing them is slow under the fuzzer's
		// instrumentation and TestCharts covers them.
		var b bytes.Buffer
		if err := r.writeHTML(&b, fixedOpts, noCharts); err != nil {
			t.Fatalf("render: %v", err)
		}
	})
}

// fuzzEdits runs check on the report built from each input's edit of the
// compact session (see FuzzBuild), when Build accepts it.
func fuzzEdits(f *testing.F, check func(t *testing.T, r *Report)) {
	envs := compactSession()
	if r, err := Build(envs); err != nil || len(r.Results) < 6 {
		f.Fatalf("the compact session does not build a report of its 6 results: %v", err)
	}
	for _, i := range []int{0, 5, 20, 40, len(envs) - 1} {
		f.Add(i, uint16(0), uint8(0), []byte{})           // the record as it is
		f.Add(i, uint16(10), uint8(3), []byte(`"x"`))     // a value of another type
		f.Add(i, uint16(0), uint8(0), []byte(`{"id":1}`)) // replaced whole
	}
	for i, e := range envs {
		if e.Kind == entry.KindEvent {
			f.Add(i, uint16(0), uint8(0), []byte(`{"name":""}`)) // an event without a name
			break
		}
	}
	f.Add(3, uint16(0), uint8(0), []byte(`{"position":"up 9e999r"}`))
	// The session is made once; each input edits a copy of its slice
	// (Build does not write into payloads).
	f.Fuzz(func(t *testing.T, i int, at uint16, drop uint8, patch []byte) {
		envs := slices.Clone(envs)
		if i < 0 {
			i = -i
		}
		i %= len(envs)
		if json.Valid(patch) {
			envs[i].Payload = patch
		} else {
			old := envs[i].Payload
			off := int(at) % (len(old) + 1)
			end := min(off+int(drop), len(old))
			envs[i].Payload = append(append(append([]byte{}, old[:off]...), patch...), old[end:]...)
		}
		r, err := Build(envs)
		if err != nil {
			if !strings.Contains(err.Error(), "record") {
				t.Fatalf("error does not name the record: %v", err)
			}
			return
		}
		check(t, r)
	})
}

func FuzzParsePosition(f *testing.F) {
	for _, s := range []string{"centre", "up 0.9r", "r=0.5 a=315", "0.7 r -90 deg", "left", "NaN r 45deg", "0.5r Infdeg"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		r, a, ok := ParsePosition(s)
		if ok && (r < 0 || r > 1.5 || a < 0 || a >= 360) {
			t.Fatalf("ParsePosition(%q) = %g, %g: out of range", s, r, a)
		}
	})
}
