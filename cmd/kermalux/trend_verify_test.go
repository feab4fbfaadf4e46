//go:build !board

package main

import (
	"context"
	"database/sql"
	"io"
	"log/slog"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/journaltest"
	"kermalux/firmware-host/journal/store"
	"kermalux/firmware-host/journal/transfer/receive"
)

// trend verifies the intensifier's stored sessions before it draws a
// line through their results (issue 14 item 2: every reader of records
// verifies first): a result edited in the store after it was received is
// refused, naming the record, exit 1; --unverified shows the trend with
// each problem printed first. The report package's test covers the
// verification itself; this one the command's gate.
func TestTrendRefusesUnverifiedStore(t *testing.T) {
	sp, serial := trendStore(t)
	code, out, errb := run(t, "trend", serial, "--store", sp)
	if code != exitOK || !strings.Contains(out, "21.3") {
		t.Fatalf("trend of an untouched store: exit %d\n%s\n%s", code, out, errb)
	}

	// The first conversion factor, 21.3 as journalled, edited in the
	// store's record.
	seq := tamperStore(t, sp, "records")
	code, out, errb = run(t, "trend", serial, "--store", sp)
	if code != exitFailure || strings.Contains(out, "31.3") {
		t.Errorf("trend of a tampered store: exit %d, want %d and no trend\n%s", code, exitFailure, out)
	}
	if rec := "record " + strconv.FormatInt(seq, 10); !strings.Contains(errb, rec) || !strings.Contains(errb, "hash mismatch") {
		t.Errorf("the refusal does not name %s and its hash mismatch: %q", rec, errb)
	}
	code, out, errb = run(t, "trend", serial, "--store", sp, "--unverified")
	if code != exitOK || !strings.Contains(errb, "NOT VERIFIED") || !strings.Contains(out, "31.3") {
		t.Errorf("trend --unverified: exit %d\nstdout %s\nstderr %s", code, out, errb)
	}
}

// The store keeps each result twice: the signed record, and a row of its
// results table that trend and the report's history query. An edit of
// that row (which no signature covers) must not reach a trend: the values
// come from the records, which verify. Before, the trend printed the
// edited 31.3 while every record verified.
func TestTrendReadsVerifiedRecords(t *testing.T) {
	sp, serial := trendStore(t)
	tamperStore(t, sp, "results")
	code, out, errb := run(t, "trend", serial, "--store", sp)
	if code != exitOK || strings.Contains(out, "31.3") || !strings.Contains(out, "21.3") {
		t.Errorf("trend after an edit of the results table: exit %d, want the journalled 21.3\n%s\n%s", code, out, errb)
	}
}

// trendStore is a store that received two finished sessions of a board on
// one intensifier (each with a conversion factor of 21.3), and that
// intensifier's serial.
func trendStore(t *testing.T) (string, string) {
	t.Helper()
	jp, key := boardJournal(t, t.TempDir())
	// A second session on the same intensifier (journaltest's serials
	// repeat every seven sessions), so the trend has two points.
	appendSession(t, jp, 7, 3)
	sp := pushedStore(t, jp, key)
	st, err := store.Open(sp)
	if err != nil {
		t.Fatal(err)
	}
	infos, _ := st.Sessions(context.Background(), store.Query{})
	st.Close()
	if len(infos) != 2 || infos[0].Session.IntensifierSerial != infos[1].Session.IntensifierSerial {
		t.Fatalf("sessions stored %+v", infos)
	}
	return sp, infos[0].Session.IntensifierSerial
}

// pushedStore is a new store that enrolled the board key and received
// the journal at jp by kermalux push.
func pushedStore(t *testing.T, jp, key string) string {
	t.Helper()
	sp := filepath.Join(t.TempDir(), "office.db")
	if code, out, errb := run(t, "enroll", "--store", sp, "--key", key, "--name", "test-board"); code != exitOK {
		t.Fatalf("enroll: exit %d %s %s", code, out, errb)
	}
	st, err := store.Open(sp)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	srv := httptest.NewServer(receive.Handler(st, receive.Options{Log: slog.New(slog.NewTextHandler(io.Discard, nil))}))
	defer srv.Close()
	if code, out, errb := run(t, "push", "--journal", jp, "--to", srv.URL); code != exitOK {
		t.Fatalf("push: exit %d %s %s", code, out, errb)
	}
	return sp
}

// tamperStore edits the first conversion factor (21.3 to 31.3) in table
// (records or results) of the store at sp and returns its record number.
func tamperStore(t *testing.T, sp, table string) int64 {
	t.Helper()
	db, err := sql.Open("sqlite", sp)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	var session string
	var seq int64
	if err := db.QueryRow(`SELECT session, seq FROM records WHERE kind = 'result' AND payload LIKE '%conversion_factor%' ORDER BY rowid LIMIT 1`).Scan(&session, &seq); err != nil {
		t.Fatal(err)
	}
	res, err := db.Exec(`UPDATE `+table+` SET payload = replace(payload, '"value":21.3', '"value":31.3') WHERE session = ? AND seq = ?`, session, seq)
	if err != nil {
		t.Fatal(err)
	}
	if n, _ := res.RowsAffected(); n != 1 {
		t.Fatalf("tamper %s: %d rows", table, n)
	}
	return seq
}

// A result's row deleted from the results index (or moved to another
// intensifier) would drop it from the trend while every record verifies:
// the trend's verification counts each session's result records against
// the index and refuses a difference.
func TestTrendRefusesEditedIndex(t *testing.T) {
	for _, edit := range []string{
		`DELETE FROM results WHERE rowid = (SELECT min(rowid) FROM results)`,
		`UPDATE results SET serial = 'another' WHERE rowid = (SELECT min(rowid) FROM results)`,
	} {
		sp, serial := trendStore(t)
		db, err := sql.Open("sqlite", sp)
		if err != nil {
			t.Fatal(err)
		}
		res, err := db.Exec(edit)
		db.Close()
		if n, _ := res.RowsAffected(); err != nil || n != 1 {
			t.Fatalf("%s: %d rows, %v", edit, n, err)
		}
		code, out, errb := run(t, "trend", serial, "--store", sp)
		if code != exitFailure || !strings.Contains(errb, "results index") {
			t.Errorf("%s: trend exit %d, want %d naming the index\n%s\n%s", edit, code, exitFailure, out, errb)
		}
	}
}

// A report of an intensifier's newer session shows its earlier results
// (the history chart, the baseline): those sessions verify too. An edited
// result of the first session refuses the report of the second, naming
// the record; before, only the reported session was verified.
func TestReportVerifiesItsHistory(t *testing.T) {
	sp, serial := trendStore(t)
	st, err := store.Open(sp)
	if err != nil {
		t.Fatal(err)
	}
	infos, _ := st.Sessions(context.Background(), store.Query{Serial: serial})
	st.Close()
	seq := tamperStore(t, sp, "records") // in the first session
	code, _, errb := run(t, "report", "--store", sp, "--session", infos[1].ID, "--out", t.TempDir(), "--format", "csv")
	if code != exitFailure || !strings.Contains(errb, infos[0].ID+" record "+strconv.FormatInt(seq, 10)) {
		t.Errorf("report of the second session with the first edited: exit %d, want %d naming %s record %d\n%s", code, exitFailure, infos[0].ID, seq, errb)
	}
	out := t.TempDir()
	code, _, errb = run(t, "report", "--store", sp, "--session", infos[1].ID, "--out", out, "--format", "csv", "--unverified")
	csvs, _ := filepath.Glob(filepath.Join(out, "*-results.csv"))
	if code != exitOK || len(csvs) != 1 {
		t.Fatalf("report --unverified: exit %d, %v\n%s", code, csvs, errb)
	}
	if b, _ := os.ReadFile(csvs[0]); !strings.Contains(string(b), "NOT VERIFIED") {
		t.Errorf("report --unverified of a session whose history does not verify carries no stamp:\n%.400s", b)
	}
}

// appendSession writes journaltest's finished session n, with readings
// readings a step, into the board journal at jp and returns its id.
func appendSession(t *testing.T, jp string, n, readings int) string {
	t.Helper()
	j, err := journal.Open(jp, journal.Options{})
	if err != nil {
		t.Fatal(err)
	}
	id, err := j.Begin(context.Background(), journaltest.Session(n))
	if err == nil {
		err = journaltest.WriteSession(context.Background(), j, id, readings, true, nil)
	}
	j.Close()
	if err != nil {
		t.Fatal(err)
	}
	return id
}
