package store

import (
	"context"
	"path/filepath"
	"strings"
	"testing"
)

// TestInsertRowsCountsWhatSQLiteIgnored: on SQLite the bulk inserts are
// INSERT OR IGNORE (no statement journal), so a row that meets a unique
// key is skipped rather than refused; insertRows must still fail on it,
// by the count of rows inserted, and the transaction keeps nothing after
// its rollback.
func TestInsertRowsCountsWhatSQLiteIgnored(t *testing.T) {
	ctx := context.Background()
	s, err := Open(filepath.Join(t.TempDir(), "store.db"))
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	tx, err := s.Begin(ctx)
	if err != nil {
		t.Fatal(err)
	}
	row := []any{"sess-1", int64(1), "reading", "2026-03-04T10:00:00.000000000Z", int64(0), "b", `{}`, "00", "aa", "bb"}
	err = tx.insertRows(ctx, "records", 10, 2, append(append([]any{}, row...), row...))
	if err == nil || !strings.Contains(err.Error(), "1 of 2 rows") {
		t.Fatalf("two rows with one (session, seq): err = %v, want the count of rows inserted named", err)
	}
	tx.Rollback()
	var n int
	if err := s.db.QueryRowContext(ctx, `SELECT count(*) FROM records`).Scan(&n); err != nil || n != 0 {
		t.Fatalf("records after the rollback: %d, %v; want 0", n, err)
	}
}
