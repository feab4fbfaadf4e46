package report

import (
	"context"
	"crypto/ed25519"
	"encoding/hex"
	"errors"
	"fmt"
	"strings"
	"testing"

	"kermalux/firmware-host/journal/store"
	"kermalux/firmware-host/journal/store/storetest"
)

// The store's sessions row (site, room, model, intensifier serial, start,
// the payloads and the mark) copies what the signed records say, to be
// found by; no signature covers it. An SQL edit of it, on either backend,
// is named by the verification that report and trend run first (issue 14
// item 2: every reader of records verifies), the session and the column;
// a report is refused, and what it and the trend show comes from the
// records, not the row. Before, the edited site and serial reached the
// trend and the report's history with every check passing.
func TestStoreSessionRowEdits(t *testing.T) {
	storetest.Each(t, func(t *testing.T, backend string) {
		ctx := context.Background()
		target := storetest.Target(t, backend)
		buildStoreAt(t, t.TempDir(), target, 2, 2)
		st := storetest.Open(t, target)
		db := storetest.SQL(t, target)
		exec := func(q string) int64 {
			t.Helper()
			res, err := db.Exec(q)
			if err != nil {
				t.Fatalf("%s: %v", q, err)
			}
			n, _ := res.RowsAffected()
			return n
		}
		infos, err := st.Sessions(ctx, store.Query{Serial: "HV-2291"})
		if err != nil || len(infos) != 2 {
			t.Fatalf("sessions of HV-2291: %d, %v", len(infos), err)
		}
		first := infos[0]
		if len(first.Changed) != 0 || first.End == nil {
			t.Fatalf("untouched session: changed %q, end %v", first.Changed, first.End)
		}
		for _, in := range infos {
			if ps, err := VerifyStoreSession(ctx, st, in.ID); err != nil || len(ps) != 0 {
				t.Fatalf("untouched session %s: %q %v", in.ID, ps, err)
			}
		}
		// A second enrolled board, for a row moved to it.
		other, _, _ := ed25519.GenerateKey(nil)
		if err := st.Enroll(ctx, other, "other board"); err != nil {
			t.Fatal(err)
		}
		exec(`CREATE TABLE saved_sessions AS SELECT * FROM sessions`)
		exec(`CREATE TABLE saved_results AS SELECT * FROM results`)
		id := first.ID
		where := ` WHERE id = '` + id + `'`
		cases := []struct {
			column string
			edits  []string
			serial string // another trend that shows it
		}{
			{"site", []string{`UPDATE sessions SET site = 'Elsewhere'` + where}, ""},
			{"room", []string{`UPDATE sessions SET room = 'Room 9'` + where}, ""},
			{"model", []string{`UPDATE sessions SET model = 'another model'` + where}, ""},
			// The serial moved, with the results index, to another
			// intensifier: the session left HV-2291's trend unseen. It is
			// named in both trends.
			{"serial", []string{`UPDATE sessions SET serial = 'HV-0000'` + where,
				`UPDATE results SET serial = 'HV-0000' WHERE session = '` + id + `'`}, "HV-0000"},
			{"started", []string{`UPDATE sessions SET started_ns = started_ns + 86400000000000` + where,
				`UPDATE results SET started_ns = started_ns + 86400000000000 WHERE session = '` + id + `'`}, ""},
			{"payload", []string{`UPDATE sessions SET payload = replace(payload, '"site":"', '"site":"X')` + where}, ""},
			{"high", []string{`UPDATE sessions SET high = high - 1` + where}, ""},
			{"head", []string{`UPDATE sessions SET head = '` + strings.Repeat("0", 64) + `'` + where}, ""},
			{"ended", []string{`UPDATE sessions SET ended = 0` + where}, ""},
			{"end_payload", []string{`UPDATE sessions SET end_payload = replace(end_payload, '"outcome":"', '"outcome":"x')` + where}, ""},
			{"board", []string{`UPDATE sessions SET board = '` + hex.EncodeToString(other) + `'` + where}, ""},
		}
		for _, c := range cases {
			for _, e := range c.edits {
				if n := exec(e); n == 0 {
					t.Fatalf("%s: no row changed", e)
				}
			}
			ps, err := VerifyStoreSession(ctx, st, id)
			if err != nil || len(ps) != 1 || !strings.Contains(ps[0], "session "+id+": the store's session row says "+c.column+" ") {
				t.Errorf("%s edited: VerifyStoreSession %q, %v", c.column, ps, err)
			}
			// The trend's gate finds it among the intensifier's sessions.
			for _, serial := range []string{"HV-2291", c.serial} {
				if serial == "" {
					continue
				}
				ps, err = VerifyStoreSerial(ctx, st, serial)
				if err != nil || !containsAll(ps, id, c.column) {
					t.Errorf("%s edited: VerifyStoreSerial(%s) %q, %v", c.column, serial, ps, err)
				}
				_, err = FromStore(ctx, st, Selection{Serial: serial})
				var ue *UnverifiedError
				if !errors.As(err, &ue) || !strings.Contains(err.Error(), id) {
					t.Errorf("%s edited: the report of %s was not refused naming %s: %v", c.column, serial, id, err)
				}
			}
			// What a trend reads is the signed records' own (the results
			// index moved with the serial leaves the session out of the
			// history, which the gate above refused).
			hs, err := (StoreHistory{st}).History(ctx, "HV-2291")
			if err != nil || len(hs) == 0 {
				t.Fatalf("%s edited: history %d, %v", c.column, len(hs), err)
			}
			if c.column != "serial" && (hs[0].Session != id || hs[0].Site != first.Session.Site || hs[0].Room != first.Session.Room || !hs[0].Date.Equal(first.Session.Started)) {
				t.Errorf("%s edited: the history's first point is %s %q %q %v, the signed session %s %q %q %v", c.column,
					hs[0].Session, hs[0].Site, hs[0].Room, hs[0].Date, id, first.Session.Site, first.Session.Room, first.Session.Started)
			}
			got, err := st.Session(ctx, id)
			if err != nil || got.Session.Site != first.Session.Site || (got.End == nil) != (first.End == nil) || got.Records != first.Records || got.BoardName != first.BoardName {
				t.Errorf("%s edited: the session read as %+v, %v", c.column, got, err)
			}
			exec(`DELETE FROM sessions`)
			exec(`INSERT INTO sessions SELECT * FROM saved_sessions`)
			exec(`DELETE FROM results`)
			exec(`INSERT INTO results SELECT * FROM saved_results`)
			if ps, err := VerifyStoreSerial(ctx, st, "HV-2291"); err != nil || len(ps) != 0 {
				t.Fatalf("restored after %s: %q %v", c.column, ps, err)
			}
		}
	})
}

func containsAll(lines []string, words ...string) bool {
	for _, l := range lines {
		ok := true
		for _, w := range words {
			ok = ok && strings.Contains(l, w)
		}
		if ok {
			return true
		}
	}
	return false
}

// A session deleted from the store whole (its row, records, results and
// proofs), on either backend: nothing left in the store is wrong, but the
// session the board began next names it as the one before, so the
// verification that report and trend run first names it. Here the 2025
// yearly check of HV-2291, followed on the board by another intensifier's
// session; the trend of that other intensifier is not stopped by it.
func TestStoreMissingSession(t *testing.T) {
	storetest.Each(t, func(t *testing.T, backend string) {
		ctx := context.Background()
		target := storetest.Target(t, backend)
		buildStoreAt(t, t.TempDir(), target, 2, 3)
		st := storetest.Open(t, target)
		db := storetest.SQL(t, target)
		if ps, err := VerifyStoreSerial(ctx, st, "HV-2291"); err != nil || len(ps) != 0 {
			t.Fatalf("untouched store: %q %v", ps, err)
		}
		infos, err := st.Sessions(ctx, store.Query{Serial: "HV-2291"})
		if err != nil || len(infos) != 3 {
			t.Fatalf("sessions of HV-2291: %d, %v", len(infos), err)
		}
		middle := infos[1]
		for _, q := range []string{`DELETE FROM records WHERE session = '%s'`, `DELETE FROM results WHERE session = '%s'`, `DELETE FROM proofs WHERE session = '%s'`, `DELETE FROM sessions WHERE id = '%s'`} {
			if _, err := db.Exec(fmt.Sprintf(q, middle.ID)); err != nil {
				t.Fatalf("%s: %v", q, err)
			}
		}
		ps, err := VerifyStoreSerial(ctx, st, "HV-2291")
		if err != nil {
			t.Fatal(err)
		}
		if len(ps) != 1 || !strings.Contains(ps[0], "session "+middle.ID+" of intensifier HV-2291 is not in the store") {
			t.Fatalf("after deleting %s: problems %q, want it named", middle.ID, ps)
		}
		others, err := st.Sessions(ctx, store.Query{})
		if err != nil {
			t.Fatal(err)
		}
		for _, o := range others {
			if o.Session.IntensifierSerial == "HV-2291" {
				continue
			}
			if ps, err := VerifyStoreSerial(ctx, st, o.Session.IntensifierSerial); err != nil || len(ps) != 0 {
				t.Errorf("the trend of %s, whose sessions are all there: %q %v", o.Session.IntensifierSerial, ps, err)
			}
			break
		}
	})
}
