package report

import (
	"bytes"
	"context"
	"database/sql"
	"encoding/json"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/store"
	"kermalux/procedures/entry"
)

// tamperResult edits the first conversion factor result of the journal at
// path with SQL, as a tester with the file would (the value's digits
// change; the hash and signature stay the old ones).
func tamperResult(t *testing.T, path string) {
	t.Helper()
	db, err := sql.Open("sqlite", path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	res, err := db.Exec(`UPDATE records SET payload = replace(payload, '"value":1', '"value":2') WHERE seq = (SELECT min(seq) FROM records WHERE kind = 'result' AND payload LIKE '%conversion_factor%')`)
	if err != nil {
		t.Fatal(err)
	}
	if n, _ := res.RowsAffected(); n != 1 {
		t.Fatalf("%d rows changed", n)
	}
}

// A report from a journal that does not verify is refused, naming the
// record (a conversion factor edited after the session used to appear as
// a pass); forced with allowUnverified, every output carries the stamp.
func TestReportRefusesUnverifiedJournal(t *testing.T) {
	ctx := context.Background()
	path := writeJournal(t)
	if _, err := FromJournal(ctx, path, ""); err != nil {
		t.Fatalf("the untouched journal: %v", err)
	}
	tamperResult(t, path)
	_, err := FromJournal(ctx, path, "")
	var ue *UnverifiedError
	if !errors.As(err, &ue) || !errors.Is(err, ErrUnverified) {
		t.Fatalf("tampered journal: %v", err)
	}
	if !strings.Contains(err.Error(), "(result)") || !strings.Contains(err.Error(), "hash mismatch") {
		t.Errorf("error does not name the record: %v", err)
	}
	r, err := FromJournalChecked(ctx, path, "", true)
	if err != nil {
		t.Fatal(err)
	}
	if len(r.Unverified) == 0 || !strings.HasPrefix(r.Review[0], "The records do not verify") {
		t.Fatalf("forced report: unverified %q, review %q", r.Unverified, r.Review)
	}
	html := renderHTML(t, r)
	if n := strings.Count(html, "NOT VERIFIED: the journal this report comes from does not verify"); n != 2 {
		t.Errorf("HTML carries the stamp %d times, want the banner and the stamp printed on every page", n)
	}
	var csv bytes.Buffer
	if err := r.WriteResultsCSV(&csv); err != nil {
		t.Fatal(err)
	}
	if !strings.HasPrefix(csv.String(), `"NOT VERIFIED:`) {
		t.Errorf("results CSV starts %.60q", csv.String())
	}
	var pdf bytes.Buffer
	if err := r.WritePDF(&pdf, fixedOpts); err != nil {
		t.Fatal(err)
	}
	// The untouched report carries no stamp.
	if html := renderHTML(t, sampleReport(t)); strings.Contains(html, "NOT VERIFIED") {
		t.Error("a verified report is stamped")
	}
}

// The journal's JSON-lines export is verified too: each session's chain
// and signatures against the key its session record names.
func TestReportRefusesUnverifiedExport(t *testing.T) {
	ctx := context.Background()
	path := writeJournal(t)
	var lines bytes.Buffer
	err := journal.Export(ctx, path, func(r journal.Record) error {
		b, err := jsonLine(r)
		lines.Write(b)
		return err
	})
	if err != nil {
		t.Fatal(err)
	}
	exp := filepath.Join(t.TempDir(), "export.jsonl")
	os.WriteFile(exp, lines.Bytes(), 0o600)
	if _, err := FromJournal(ctx, exp, ""); err != nil {
		t.Fatalf("untouched export: %v", err)
	}
	bad := bytes.Replace(lines.Bytes(), []byte(`\"value\":1`), []byte(`\"value\":2`), 1)
	if bytes.Equal(bad, lines.Bytes()) {
		bad = bytes.Replace(lines.Bytes(), []byte(`"value":1`), []byte(`"value":2`), 1)
	}
	os.WriteFile(exp, bad, 0o600)
	if _, err := FromJournal(ctx, exp, ""); !errors.Is(err, ErrUnverified) {
		t.Fatalf("tampered export: %v", err)
	}
}

// A stored session is verified before it is reported or trended: its
// records edited in the store are refused; a key the store did not enroll
// is refused.
func TestReportRefusesUnverifiedStore(t *testing.T) {
	ctx := context.Background()
	sp := buildStore(t, t.TempDir(), 1, 1)
	st, err := store.Open(sp)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	infos, err := st.Sessions(ctx, store.Query{})
	if err != nil || len(infos) != 1 {
		t.Fatalf("sessions %v %v", infos, err)
	}
	sel := Selection{Session: infos[0].ID}
	if _, err := FromStore(ctx, st, sel); err != nil {
		t.Fatalf("untouched store: %v", err)
	}
	serial := infos[0].Session.IntensifierSerial
	if ps, err := VerifyStoreSerial(ctx, st, serial); err != nil || len(ps) != 0 {
		t.Fatalf("untouched serial: %v %v", ps, err)
	}
	tamperResult(t, sp)
	if _, err := FromStore(ctx, st, sel); !errors.Is(err, ErrUnverified) {
		t.Fatalf("tampered store: %v", err)
	}
	if ps, err := VerifyStoreSerial(ctx, st, serial); err != nil || len(ps) != 1 {
		t.Fatalf("tampered serial: %v %v", ps, err)
	}
	sel.AllowUnverified = true
	rs, err := FromStore(ctx, st, sel)
	if err != nil || len(rs) != 1 || len(rs[0].Unverified) == 0 {
		t.Fatalf("forced: %v", err)
	}
}

func jsonLine(r journal.Record) ([]byte, error) {
	b, err := json.Marshal(r)
	return append(b, '\n'), err
}

// An event with an empty name (or one starting with a multi-byte letter)
// renders; it used to panic with a slice out of range, found by FuzzBuild.
func TestEventWithoutName(t *testing.T) {
	for _, name := range []string{"", "é_event", "x"} {
		envs := sampleSession()
		for i, e := range envs {
			if e.Kind == entry.KindEvent {
				envs[i].Payload = json.RawMessage(`{"step":1,"name":"` + name + `","beam_on_s":0}`)
				break
			}
		}
		r, err := Build(envs)
		if err != nil {
			t.Fatalf("%q: %v", name, err)
		}
		var b bytes.Buffer
		if err := r.writeHTML(&b, fixedOpts, noCharts); err != nil {
			t.Fatalf("%q: %v", name, err)
		}
	}
}
