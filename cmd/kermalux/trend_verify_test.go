//go:build !board

package main

import (
	"context"
	"database/sql"
	"io"
	"log/slog"
	"net/http/httptest"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

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

// trendStore is a store that received one finished session of a board
// (its results: conversion factor 21.3), and that session's intensifier.
func trendStore(t *testing.T) (string, string) {
	t.Helper()
	dir := t.TempDir()
	jp, key := boardJournal(t, dir)
	sp := filepath.Join(dir, "office.db")
	if code, out, errb := run(t, "enroll", "--store", sp, "--key", key, "--name", "trend-board"); code != exitOK {
		t.Fatalf("enroll: exit %d %s %s", code, out, errb)
	}
	st, err := store.Open(sp)
	if err != nil {
		t.Fatal(err)
	}
	srv := httptest.NewServer(receive.Handler(st, receive.Options{Log: slog.New(slog.NewTextHandler(io.Discard, nil))}))
	code, out, errb := run(t, "push", "--journal", jp, "--to", srv.URL)
	srv.Close()
	infos, _ := st.Sessions(context.Background(), store.Query{})
	st.Close()
	if code != exitOK || len(infos) != 1 {
		t.Fatalf("push: exit %d %s %s, %d sessions stored", code, out, errb, len(infos))
	}
	return sp, infos[0].Session.IntensifierSerial
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
	var seq int64
	if err := db.QueryRow(`SELECT min(seq) FROM records WHERE kind = 'result' AND payload LIKE '%conversion_factor%'`).Scan(&seq); err != nil {
		t.Fatal(err)
	}
	res, err := db.Exec(`UPDATE `+table+` SET payload = replace(payload, '"value":21.3', '"value":31.3') WHERE seq = ?`, seq)
	if err != nil {
		t.Fatal(err)
	}
	if n, _ := res.RowsAffected(); n != 1 {
		t.Fatalf("tamper %s: %d rows", table, n)
	}
	return seq
}
