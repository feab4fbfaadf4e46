package store_test

import (
	"context"
	"testing"

	"kermalux/firmware-host/journal/journaltest"
	"kermalux/firmware-host/journal/store"
	"kermalux/firmware-host/journal/store/storetest"
)

// Misfiled finds a session whose row was filed under another serial by an
// SQL edit, by its signed session record, for serials with characters
// LIKE and JSON treat specially (_ % ! " \ < & and non-ASCII), on both
// backends; a session filed where its record says is not listed, nor one
// of a serial that only shares a prefix.
func TestMisfiled(t *testing.T) {
	storetest.Each(t, func(t *testing.T, backend string) {
		ctx := context.Background()
		st, j, target := enrolledBoard(t, backend)
		serials := []string{"LX_1%!", `HV "2291" \ <&>`, "Ø-77 é", "LX_1%!-2"}
		ids := map[string]string{}
		for i, serial := range serials {
			s := journaltest.Session(i)
			s.IntensifierSerial = serial
			id, err := j.Begin(ctx, s)
			if err != nil {
				t.Fatal(err)
			}
			journaltest.WriteSession(ctx, j, id, 1, true, nil)
			if _, err := st.Apply(ctx, seal(t, j, st.ID(), id, 0, 0), store.ApplyOptions{}); err != nil {
				t.Fatal(err)
			}
			ids[serial] = id
		}
		for _, serial := range serials {
			if m, err := st.Misfiled(ctx, serial); err != nil || len(m) != 0 {
				t.Fatalf("untouched store, %q: %d misfiled, %v", serial, len(m), err)
			}
		}
		db := storetest.SQL(t, target)
		if _, err := db.Exec(`UPDATE sessions SET serial = 'elsewhere'`); err != nil {
			t.Fatal(err)
		}
		for _, serial := range serials {
			m, err := st.Misfiled(ctx, serial)
			if err != nil || len(m) != 1 || m[0].ID != ids[serial] || len(m[0].Changed) == 0 {
				t.Errorf("serial %q filed elsewhere: %+v, %v", serial, m, err)
			}
		}
	})
}
