package store

import (
	"context"
	"crypto/rand"
	"database/sql"
	"encoding/hex"
	"errors"
	"fmt"
	"strconv"
	"strings"
	"time"
)

// SchemaVersion is the newest schema version this program writes and
// reads: the number of migrations below.
const SchemaVersion = 2

// migration is one step of the schema history, shared by both backends:
// the SQL is written in the subset SQLite and PostgreSQL read alike
// (BIGINT, DOUBLE PRECISION and TEXT columns; SQLite maps BIGINT to its
// INTEGER affinity, so a version 1 file created with INTEGER is the same).
type migration struct {
	version int
	what    string
	sql     string
}

var migrations = []migration{
	{1, "boards, sessions, records, results", `
CREATE TABLE IF NOT EXISTS boards(
	key      TEXT PRIMARY KEY,
	name     TEXT NOT NULL,
	enrolled TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS sessions(
	id          TEXT PRIMARY KEY,
	board       TEXT NOT NULL REFERENCES boards(key),
	site        TEXT NOT NULL,
	room        TEXT NOT NULL,
	model       TEXT NOT NULL,
	serial      TEXT NOT NULL,
	started_ns  BIGINT NOT NULL,
	payload     TEXT NOT NULL,
	high        BIGINT NOT NULL,
	head        TEXT NOT NULL,
	ended       BIGINT NOT NULL DEFAULT 0,
	end_payload TEXT,
	received    TEXT NOT NULL);
CREATE INDEX IF NOT EXISTS sessions_site    ON sessions(site, started_ns);
CREATE INDEX IF NOT EXISTS sessions_room    ON sessions(site, room, started_ns);
CREATE INDEX IF NOT EXISTS sessions_serial  ON sessions(serial, started_ns);
CREATE INDEX IF NOT EXISTS sessions_started ON sessions(started_ns);
CREATE TABLE IF NOT EXISTS records(
	session TEXT NOT NULL,
	seq     BIGINT NOT NULL,
	kind    TEXT NOT NULL,
	wall    TEXT NOT NULL,
	mono_ns BIGINT NOT NULL,
	boot_id TEXT NOT NULL,
	payload TEXT NOT NULL,
	prev    TEXT NOT NULL,
	hash    TEXT NOT NULL,
	sig     TEXT NOT NULL);
CREATE UNIQUE INDEX IF NOT EXISTS records_seq ON records(session, seq);
CREATE TABLE IF NOT EXISTS results(
	session    TEXT NOT NULL,
	seq        BIGINT NOT NULL,
	serial     TEXT NOT NULL,
	started_ns BIGINT NOT NULL,
	quantity   TEXT NOT NULL,
	field_mode TEXT NOT NULL,
	value      DOUBLE PRECISION NOT NULL,
	verdict    TEXT NOT NULL,
	payload    TEXT NOT NULL);
CREATE UNIQUE INDEX IF NOT EXISTS results_seq ON results(session, seq);
CREATE INDEX IF NOT EXISTS results_serial ON results(serial, started_ns, quantity);
`},
	{2, "store identity (audience), revoked boards, signed heads, the store's log", `
CREATE TABLE IF NOT EXISTS store_info(
	id      TEXT NOT NULL,
	created TEXT NOT NULL);
ALTER TABLE boards ADD COLUMN revoked TEXT;
CREATE TABLE IF NOT EXISTS proofs(
	session  TEXT NOT NULL,
	first    BIGINT NOT NULL,
	last     BIGINT NOT NULL,
	head     TEXT NOT NULL,
	audience TEXT NOT NULL,
	sig      TEXT NOT NULL);
CREATE INDEX IF NOT EXISTS proofs_session ON proofs(session, last);
CREATE TABLE IF NOT EXISTS log(
	at     TEXT NOT NULL,
	board  TEXT NOT NULL,
	event  TEXT NOT NULL,
	detail TEXT NOT NULL);
CREATE INDEX IF NOT EXISTS log_at ON log(at);
`},
}

// migrate brings the schema to SchemaVersion in one transaction, refusing
// a store written by a newer program.
func (s *Store) migrate(ctx context.Context) error {
	tx, err := s.db.BeginTx(ctx, nil)
	if err != nil {
		return err
	}
	defer tx.Rollback()
	if s.dialect == postgres {
		// One migrator at a time: two programs opening a new database at once.
		if _, err := tx.ExecContext(ctx, `SELECT pg_advisory_xact_lock(7043116)`); err != nil {
			return fmt.Errorf("lock schema: %w", err)
		}
	}
	if _, err := tx.ExecContext(ctx, `CREATE TABLE IF NOT EXISTS schema_version(version BIGINT NOT NULL, created TEXT NOT NULL)`); err != nil {
		return fmt.Errorf("create schema_version: %w", err)
	}
	var have sql.NullInt64
	if err := tx.QueryRowContext(ctx, `SELECT max(version) FROM schema_version`).Scan(&have); err != nil {
		return fmt.Errorf("read schema version: %w", err)
	}
	if int(have.Int64) > SchemaVersion {
		return fmt.Errorf("schema version %d, this program reads versions up to %d (use a newer kermalux)", have.Int64, SchemaVersion)
	}
	now := time.Now().UTC().Format(time.RFC3339)
	for _, m := range migrations {
		if m.version <= int(have.Int64) {
			continue
		}
		for _, stmt := range strings.Split(m.sql, ";") {
			if strings.TrimSpace(stmt) == "" {
				continue
			}
			if _, err := tx.ExecContext(ctx, stmt); err != nil {
				return fmt.Errorf("migration %d (%s): %w", m.version, m.what, err)
			}
		}
		if _, err := tx.ExecContext(ctx, s.q(`INSERT INTO schema_version VALUES (?, ?)`), m.version, now); err != nil {
			return fmt.Errorf("migration %d: %w", m.version, err)
		}
	}
	switch err := tx.QueryRowContext(ctx, `SELECT id FROM store_info`).Scan(&s.id); {
	case errors.Is(err, sql.ErrNoRows):
		var b [16]byte
		rand.Read(b[:])
		s.id = "kxs-" + hex.EncodeToString(b[:])
		if _, err := tx.ExecContext(ctx, s.q(`INSERT INTO store_info VALUES (?, ?)`), s.id, now); err != nil {
			return fmt.Errorf("store identity: %w", err)
		}
	case err != nil:
		return fmt.Errorf("read store identity: %w", err)
	}
	return tx.Commit()
}

// Version returns the store's schema version.
func (s *Store) Version(ctx context.Context) (int, error) {
	var v int
	err := s.db.QueryRowContext(ctx, `SELECT max(version) FROM schema_version`).Scan(&v)
	return v, err
}

type dialect int

const (
	sqlite dialect = iota
	postgres
)

// q rewrites a query written with ? placeholders for the backend
// (PostgreSQL numbers them: $1, $2, ...). No query here has a ? inside a
// string literal.
func (s *Store) q(query string) string {
	if s.dialect != postgres || !strings.Contains(query, "?") {
		return query
	}
	var b strings.Builder
	b.Grow(len(query) + 16)
	n := 0
	for i := 0; i < len(query); i++ {
		if query[i] == '?' {
			n++
			b.WriteByte('$')
			b.WriteString(strconv.Itoa(n))
			continue
		}
		b.WriteByte(query[i])
	}
	return b.String()
}
