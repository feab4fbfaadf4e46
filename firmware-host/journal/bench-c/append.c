/*
 * append: durable SQLite inserts in C (the system's libsqlite3), for
 * BenchmarkDurableAppend's comparison with C SQLite in the same run. It is
 * a measuring aid, not part of kermalux (whose build never uses cgo).
 *
 *   gcc -O2 -o append append.c -lsqlite3
 *   append DIR            (the benchmark starts it; see README.md)
 *
 * It opens DIR/c-bare.db and DIR/c-journal.db with the journal's settings
 * (WAL, synchronous=FULL, busy_timeout 10 s, a 512 KiB page cache, BEGIN
 * IMMEDIATE), reads one payload line from standard input, then commands:
 *   bare N      N transactions, each one INSERT of the payload into
 *               r(id, data): the Go benchmark's bare insert
 *   journal N   N transactions, each an INSERT of a row shaped like a
 *               journal record (session, seq, kind, wall, mono_ns, boot_id,
 *               the payload, 64-hex prev and hash, 128-hex signature) and
 *               the UPDATE of its session's head, as Journal.Append writes
 *               them, without the hashing and signing
 * and answers each with one line: the nanoseconds the N commits took.
 */
#include <sqlite3.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

static void die(sqlite3 *db, const char *what) {
	fprintf(stderr, "append: %s: %s\n", what, db ? sqlite3_errmsg(db) : "");
	exit(1);
}

static sqlite3 *open_db(const char *path, const char *schema) {
	sqlite3 *db;
	if (sqlite3_open(path, &db) != SQLITE_OK) die(db, path);
	const char *pragmas = "PRAGMA busy_timeout=10000; PRAGMA journal_mode=WAL; "
	                      "PRAGMA synchronous=FULL; PRAGMA cache_size=-512;";
	if (sqlite3_exec(db, pragmas, 0, 0, 0) != SQLITE_OK) die(db, "pragmas");
	if (sqlite3_exec(db, schema, 0, 0, 0) != SQLITE_OK) die(db, "schema");
	return db;
}

static void exec(sqlite3 *db, sqlite3_stmt *st) {
	if (sqlite3_step(st) != SQLITE_DONE) die(db, "step");
	sqlite3_reset(st);
}

static long long now_ns(void) {
	struct timespec ts;
	clock_gettime(CLOCK_MONOTONIC, &ts);
	return (long long)ts.tv_sec * 1000000000LL + ts.tv_nsec;
}

int main(int argc, char **argv) {
	if (argc != 2) {
		fprintf(stderr, "usage: append DIR < commands\n");
		return 2;
	}
	static char payload[65536], line[256], path[4096];
	if (!fgets(payload, sizeof payload, stdin)) return 2;
	payload[strcspn(payload, "\n")] = 0;

	snprintf(path, sizeof path, "%s/c-bare.db", argv[1]);
	sqlite3 *bare = open_db(path, "CREATE TABLE IF NOT EXISTS r(id INTEGER PRIMARY KEY, data TEXT NOT NULL)");
	snprintf(path, sizeof path, "%s/c-journal.db", argv[1]);
	sqlite3 *jdb = open_db(path,
		"CREATE TABLE IF NOT EXISTS records(session TEXT NOT NULL, seq INTEGER NOT NULL, kind TEXT NOT NULL,"
		" wall TEXT NOT NULL, mono_ns INTEGER NOT NULL, boot_id TEXT NOT NULL, payload TEXT NOT NULL,"
		" prev TEXT NOT NULL, hash TEXT NOT NULL, sig TEXT NOT NULL);"
		"CREATE UNIQUE INDEX IF NOT EXISTS records_seq ON records(session, seq);"
		"CREATE TABLE IF NOT EXISTS heads(session TEXT PRIMARY KEY, seq INTEGER NOT NULL, hash TEXT NOT NULL,"
		" head_sig TEXT NOT NULL, ended INTEGER NOT NULL DEFAULT 0);"
		"INSERT OR IGNORE INTO heads VALUES('20260304T100000Z-e6a1e1da-0123456789abcdef', 0, '', '', 0);");

	sqlite3_stmt *bbegin, *bins, *bcommit, *jbegin, *jins, *jupd, *jcommit;
	sqlite3_prepare_v2(bare, "BEGIN IMMEDIATE", -1, &bbegin, 0);
	sqlite3_prepare_v2(bare, "INSERT INTO r(data) VALUES (?)", -1, &bins, 0);
	sqlite3_prepare_v2(bare, "COMMIT", -1, &bcommit, 0);
	sqlite3_prepare_v2(jdb, "BEGIN IMMEDIATE", -1, &jbegin, 0);
	sqlite3_prepare_v2(jdb, "INSERT INTO records VALUES (?,?,?,?,?,?,?,?,?,?)", -1, &jins, 0);
	sqlite3_prepare_v2(jdb, "UPDATE heads SET seq = ?, hash = ?, head_sig = ?, ended = 0 WHERE session = ?", -1, &jupd, 0);
	sqlite3_prepare_v2(jdb, "COMMIT", -1, &jcommit, 0);
	if (!bbegin || !bins || !bcommit || !jbegin || !jins || !jupd || !jcommit) die(0, "prepare");

	const char *session = "20260304T100000Z-e6a1e1da-0123456789abcdef";
	char hex64[65], hex128[129], wall[40];
	memset(hex64, 'a', 64), hex64[64] = 0;
	memset(hex128, 'b', 128), hex128[128] = 0;
	long long seq = 0;
	while (fgets(line, sizeof line, stdin)) {
		char mode[16];
		long n;
		if (sscanf(line, "%15s %ld", mode, &n) != 2 || n < 0) die(0, "command: want 'bare N' or 'journal N'");
		long long t0 = now_ns();
		for (long i = 0; i < n; i++) {
			if (strcmp(mode, "bare") == 0) {
				exec(bare, bbegin);
				sqlite3_bind_text(bins, 1, payload, -1, SQLITE_STATIC);
				exec(bare, bins);
				exec(bare, bcommit);
				continue;
			}
			seq++;
			snprintf(wall, sizeof wall, "2026-03-04T10:00:%02lld.%09lldZ", seq / 1000 % 60, seq % 1000 * 1000000);
			exec(jdb, jbegin);
			sqlite3_bind_text(jins, 1, session, -1, SQLITE_STATIC);
			sqlite3_bind_int64(jins, 2, seq);
			sqlite3_bind_text(jins, 3, "reading", -1, SQLITE_STATIC);
			sqlite3_bind_text(jins, 4, wall, -1, SQLITE_STATIC);
			sqlite3_bind_int64(jins, 5, seq * 1000000);
			sqlite3_bind_text(jins, 6, "8f6001d7-2449-477c-a949-26ea910c4d7a", -1, SQLITE_STATIC);
			sqlite3_bind_text(jins, 7, payload, -1, SQLITE_STATIC);
			sqlite3_bind_text(jins, 8, hex64, -1, SQLITE_STATIC);
			sqlite3_bind_text(jins, 9, hex64, -1, SQLITE_STATIC);
			sqlite3_bind_text(jins, 10, hex128, -1, SQLITE_STATIC);
			exec(jdb, jins);
			sqlite3_bind_int64(jupd, 1, seq);
			sqlite3_bind_text(jupd, 2, hex64, -1, SQLITE_STATIC);
			sqlite3_bind_text(jupd, 3, hex128, -1, SQLITE_STATIC);
			sqlite3_bind_text(jupd, 4, session, -1, SQLITE_STATIC);
			exec(jdb, jupd);
			exec(jdb, jcommit);
		}
		printf("%lld\n", now_ns() - t0);
		fflush(stdout);
	}
	sqlite3_close(bare);
	sqlite3_close(jdb);
	return 0;
}
