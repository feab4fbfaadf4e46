// Package storetest gives tests a fresh workstation store on each backend:
// an SQLite file always, and PostgreSQL when KERMALUX_TEST_POSTGRES holds
// a server URL (each store in a schema of its own, dropped afterwards).
// With KERMALUX_REQUIRE_POSTGRES=1 (as CI sets it) a missing server fails
// the test instead of skipping the PostgreSQL half.
package storetest

import (
	"context"
	"crypto/rand"
	"database/sql"
	"encoding/hex"
	"net/url"
	"os"
	"path/filepath"
	"testing"

	"kermalux/firmware-host/journal/store"
)

// Backends are the backends a suite runs on.
var Backends = []string{"sqlite", "postgres"}

// Target returns the target (file or URL) of a new, empty store on
// backend, skipping the test when PostgreSQL is not configured and not
// required.
func Target(t testing.TB, backend string) string {
	t.Helper()
	if backend == "sqlite" {
		return filepath.Join(t.TempDir(), "store.db")
	}
	base := os.Getenv("KERMALUX_TEST_POSTGRES")
	if base == "" {
		if os.Getenv("KERMALUX_REQUIRE_POSTGRES") == "1" {
			t.Fatal("KERMALUX_REQUIRE_POSTGRES=1 but KERMALUX_TEST_POSTGRES names no server")
		}
		t.Skip("PostgreSQL backend: set KERMALUX_TEST_POSTGRES=postgres://... to run it (.ci/run does)")
	}
	db, err := sql.Open("pgx", base)
	if err != nil {
		t.Fatal(err)
	}
	var b [6]byte
	rand.Read(b[:])
	schema := "kxt_" + hex.EncodeToString(b[:])
	if _, err := db.Exec(`CREATE SCHEMA ` + schema); err != nil {
		db.Close()
		t.Fatalf("PostgreSQL at KERMALUX_TEST_POSTGRES: %v", err)
	}
	t.Cleanup(func() {
		db.ExecContext(context.Background(), `DROP SCHEMA `+schema+` CASCADE`)
		db.Close()
	})
	u, err := url.Parse(base)
	if err != nil {
		t.Fatal(err)
	}
	q := u.Query()
	q.Set("search_path", schema)
	u.RawQuery = q.Encode()
	return u.String()
}

// Open opens target, closing it when the test ends.
func Open(t testing.TB, target string) *store.Store {
	t.Helper()
	st, err := store.Open(target)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { st.Close() })
	return st
}

// SQL opens target's database directly, as a person with access to it
// would, for tests that edit it behind the store's back; closed when the
// test ends.
func SQL(t testing.TB, target string) *sql.DB {
	t.Helper()
	driver := "sqlite"
	if store.IsURL(target) {
		driver = "pgx"
	}
	db, err := sql.Open(driver, target)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { db.Close() })
	return db
}

// New opens a new, empty store on backend.
func New(t testing.TB, backend string) *store.Store { return Open(t, Target(t, backend)) }

// Each runs f once per backend as a subtest.
func Each(t *testing.T, f func(t *testing.T, backend string)) {
	for _, b := range Backends {
		t.Run(b, func(t *testing.T) { f(t, b) })
	}
}
