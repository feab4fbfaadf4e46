package store_test

import (
	"context"
	"regexp"
	"strconv"
	"strings"
	"testing"

	"kermalux/firmware-host/journal/journaltest"
	"kermalux/firmware-host/journal/store"
	"kermalux/firmware-host/journal/store/storetest"
)

// Every hash, signature and key the store keeps is lower-case hex of its
// length (issue 14 item 16: a bundle's upper-case signatures were stored
// as they came, so one signature had two spellings). The stream carries
// them as raw bytes now, and a key given as text must be canonical; this
// reads what Apply stored, on both backends.
func TestStoredHexIsCanonical(t *testing.T) {
	storetest.Each(t, func(t *testing.T, backend string) {
		ctx := context.Background()
		st, j, target := enrolledBoard(t, backend)
		if err := st.Enroll(ctx, nil, "x"); err == nil {
			t.Error("an empty key was enrolled")
		}
		if _, err := store.ParseKey(strings.ToUpper(j.BoardKey())); err == nil {
			t.Error("an upper-case key was taken as canonical")
		}
		id, err := j.Begin(ctx, journaltest.Session(0))
		if err != nil {
			t.Fatal(err)
		}
		journaltest.WriteSession(ctx, j, id, 2, true, nil)
		if _, err := st.Apply(ctx, seal(t, j, st.ID(), id, 0, 4), store.ApplyOptions{}); err != nil {
			t.Fatal(err)
		}
		if _, err := st.Apply(ctx, seal(t, j, st.ID(), id, 4, 0), store.ApplyOptions{}); err != nil {
			t.Fatal(err)
		}
		db := storetest.SQL(t, target)
		hexOf := func(n int) *regexp.Regexp { return regexp.MustCompile(`^[0-9a-f]{` + strconv.Itoa(n) + `}$`) }
		for _, c := range []struct {
			query  string
			want   *regexp.Regexp
			orNone bool
		}{
			{`SELECT hash FROM records`, hexOf(64), false},
			{`SELECT prev FROM records`, hexOf(64), false},
			{`SELECT sig FROM records`, hexOf(128), true},
			{`SELECT head FROM proofs`, hexOf(64), false},
			{`SELECT sig FROM proofs`, hexOf(128), false},
			{`SELECT head FROM sessions`, hexOf(64), false},
			{`SELECT board FROM sessions`, hexOf(64), false},
			{`SELECT key FROM boards`, hexOf(64), false},
		} {
			rows, err := db.Query(c.query)
			if err != nil {
				t.Fatal(err)
			}
			n := 0
			for rows.Next() {
				var v string
				if err := rows.Scan(&v); err != nil {
					t.Fatal(err)
				}
				if !c.want.MatchString(v) && !(c.orNone && v == "") {
					t.Errorf("%s: %q is not canonical hex", c.query, v)
				}
				n++
			}
			rows.Close()
			if n == 0 {
				t.Errorf("%s: nothing stored", c.query)
			}
		}
	})
}
