package journal

import (
	"bytes"
	"context"
	"crypto/ed25519"
	"database/sql"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"kermalux/drivers/clock"
	"kermalux/firmware-host/journal/journaltest"
	"kermalux/procedures/entry"
)

func openTest(t testing.TB, dir string) *Journal {
	t.Helper()
	j, err := Open(filepath.Join(dir, "journal.db"), Options{KeyDir: filepath.Join(dir, "key"), SoftwareVersion: "test",
		Clock: clock.NewManual(time.Date(2026, 3, 4, 9, 0, 0, 0, time.UTC)), BootID: func() string { return "boot-1" }})
	if err != nil {
		t.Fatal(err)
	}
	return j
}

func TestAppendVerifyRoundTrip(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	j := openTest(t, dir)
	done, err := j.Begin(ctx, journaltest.Session(1))
	if err != nil {
		t.Fatal(err)
	}
	if err := journaltest.WriteSession(ctx, j, done, 4, true, nil); err != nil {
		t.Fatal(err)
	}
	open, err := j.Begin(ctx, journaltest.Session(2))
	if err != nil {
		t.Fatal(err)
	}
	if err := journaltest.WriteSession(ctx, j, open, 2, false, nil); err != nil {
		t.Fatal(err)
	}
	if _, err := j.Append(ctx, done, entry.KindEvent, entry.Event{Name: "late"}); !errors.Is(err, ErrSessionEnded) {
		t.Errorf("append after session_end: got %v, want ErrSessionEnded", err)
	}
	if _, err := j.Append(ctx, "no-such", entry.KindEvent, entry.Event{Name: "x"}); !errors.Is(err, ErrUnknownSession) {
		t.Errorf("append to unknown session: got %v", err)
	}
	un, err := j.Unfinished(ctx)
	if err != nil || len(un) != 1 || un[0].ID != open {
		t.Fatalf("Unfinished = %+v, %v; want only %s", un, err, open)
	}
	all, err := j.Sessions(ctx)
	if err != nil || len(all) != 2 || !all[0].Ended || all[0].End.Outcome != "complete" || all[0].Session.IntensifierSerial != "LX23-0101" {
		t.Fatalf("Sessions = %+v, %v", all, err)
	}
	if all[0].Session.BoardKey != j.BoardKey() || all[0].Session.SoftwareVersion != "test" {
		t.Errorf("Begin did not fill in board key and version: %+v", all[0].Session)
	}
	env, err := j.Envelopes(ctx, done)
	if err != nil {
		t.Fatal(err)
	}
	// 1 session + 2 steps × (8 + 4 readings) + 1 end.
	if want := 1 + 2*(8+4) + 1; len(env) != want {
		t.Fatalf("%d envelopes, want %d", len(env), want)
	}
	var rd entry.Reading
	if env[6].Kind != entry.KindReading || json.Unmarshal(env[6].Payload, &rd) != nil || rd.Raw != "MEAS 0.8710 uGy/s OK" || env[6].BootID != "boot-1" {
		t.Errorf("envelope 7 = %s %s", env[6].Kind, env[6].Payload)
	}
	j.Close()
	rep, err := Verify(ctx, filepath.Join(dir, "journal.db"))
	if err != nil || !rep.OK() {
		t.Fatalf("Verify = %+v, %v", rep, err)
	}
	if rep.Sessions != 2 || len(rep.Unfinished) != 1 || rep.Records != int64(len(env))+1+2*(8+2) {
		t.Errorf("report counts: %+v", rep)
	}
}

// TestKeyRFC8032 loads a key file holding the seed of RFC 8032 section
// 7.1 TEST 1 and expects that test's public key.
func TestKeyRFC8032(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "k")
	os.Mkdir(dir, 0o700)
	p := filepath.Join(dir, KeyFileName)
	// RFC 8032 §7.1 TEST 1, SECRET KEY and PUBLIC KEY.
	os.WriteFile(p, []byte("9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60\n"), 0o600)
	k, err := LoadKey(p)
	if err != nil {
		t.Fatal(err)
	}
	if got := hex.EncodeToString(k.Public().(ed25519.PublicKey)); got != "d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a" {
		t.Errorf("public key %s", got)
	}
}

func TestKeyPermissions(t *testing.T) {
	dir := t.TempDir()
	kd := filepath.Join(dir, "key")
	j := openTest(t, dir)
	j.Close()
	st, _ := os.Stat(filepath.Join(kd, KeyFileName))
	if st.Mode().Perm() != 0o600 {
		t.Errorf("new key file mode %o, want 600", st.Mode().Perm())
	}
	st, _ = os.Stat(kd)
	if st.Mode().Perm() != 0o700 {
		t.Errorf("new key dir mode %o, want 700", st.Mode().Perm())
	}
	os.Chmod(filepath.Join(kd, KeyFileName), 0o644)
	_, err := Open(filepath.Join(dir, "journal.db"), Options{KeyDir: kd})
	if !errors.Is(err, ErrKeyPermissions) || !strings.Contains(err.Error(), "chmod 600") {
		t.Errorf("loose key file: got %v", err)
	}
	os.Chmod(filepath.Join(kd, KeyFileName), 0o600)
	os.Chmod(kd, 0o755)
	_, err = Open(filepath.Join(dir, "journal.db"), Options{KeyDir: kd})
	if !errors.Is(err, ErrKeyPermissions) || !strings.Contains(err.Error(), "chmod 700") {
		t.Errorf("loose key dir: got %v", err)
	}
	os.Chmod(kd, 0o700)
	// Another board's key on this journal is refused.
	_, err = Open(filepath.Join(dir, "journal.db"), Options{KeyDir: filepath.Join(dir, "other")})
	if !errors.Is(err, ErrWrongBoard) {
		t.Errorf("other key: got %v", err)
	}
}

// TestCanonicalGolden pins the documented canonical bytes of a record and
// their SHA-256. The expected hash was computed outside Go with GNU
// coreutils sha256sum over testdata/record.canonical.
func TestCanonicalGolden(t *testing.T) {
	r := Record{Seq: 7, Session: "20260304T090000Z-d75a9801-00c0ffee", Kind: entry.KindValue, Wall: "2026-03-04T09:00:01.5Z",
		Mono: 1500000000, BootID: "boot-1", Prev: strings.Repeat("00", 32),
		Payload: json.RawMessage(`{"step":1,"name":"temperature","value":21.5,"unit":"°C","source":"operator"}`)}
	want, err := os.ReadFile("testdata/record.canonical")
	if err != nil {
		t.Fatal(err)
	}
	if got := r.Canonical(); !bytes.Equal(got, bytes.TrimRight(want, "\n")) {
		t.Errorf("canonical bytes\n got %s\nwant %s", got, want)
	}
	h := r.ComputeHash()
	if got := hex.EncodeToString(h[:]); got != goldenHash {
		t.Errorf("hash %s, want %s", got, goldenHash)
	}
}

func TestCanonicalPayload(t *testing.T) {
	for _, c := range []struct{ in, want string }{
		{`{ "a" : 1 }`, `{"a":1}`},
		{`{"t":"<b>&"}`, `{"t":"\u003cb\u003e\u0026"}`},
		{`[1, 2]`, `[1,2]`},
	} {
		got, err := CanonicalPayload([]byte(c.in))
		if err != nil || string(got) != c.want {
			t.Errorf("CanonicalPayload(%s) = %s, %v; want %s", c.in, got, err, c.want)
		}
	}
	if _, err := CanonicalPayload([]byte(`{"a":`)); err == nil {
		t.Error("truncated JSON accepted")
	}
}

// tamper makes a copy of the journal, changes it with f, verifies the copy
// and returns the report.
func tamper(t *testing.T, src string, f func(db *sql.DB, path string)) VerifyReport {
	t.Helper()
	dst := filepath.Join(t.TempDir(), "copy.db")
	b, err := os.ReadFile(src)
	if err != nil {
		t.Fatal(err)
	}
	os.WriteFile(dst, b, 0o600)
	if m, err := os.ReadFile(MarkPath(src)); err == nil {
		os.WriteFile(MarkPath(dst), m, 0o600)
	}
	db, err := sql.Open("sqlite", dst)
	if err != nil {
		t.Fatal(err)
	}
	f(db, dst)
	db.Close()
	rep, err := Verify(context.Background(), dst)
	if err != nil {
		t.Fatalf("verify copy: %v", err)
	}
	return rep
}

func TestVerifyFindsTampering(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	j := openTest(t, dir)
	sid, _ := j.Begin(ctx, journaltest.Session(3))
	if err := journaltest.WriteSession(ctx, j, sid, 3, true, nil); err != nil {
		t.Fatal(err)
	}
	j.Close() // checkpoints the WAL into the main file
	src := filepath.Join(dir, "journal.db")
	exec := func(q string, args ...any) func(*sql.DB, string) {
		return func(db *sql.DB, _ string) {
			if _, err := db.Exec(q, args...); err != nil {
				t.Fatal(err)
			}
		}
	}
	cases := []struct {
		name    string
		f       func(*sql.DB, string)
		seq     int64
		contain string
	}{
		{"edit a reading's value", exec(`UPDATE records SET payload = replace(payload, '"value":0.8823', '"value":0.9823') WHERE seq = 7`), 7, "hash mismatch"},
		{"delete a middle record", exec(`DELETE FROM records WHERE seq = 5`), 6, "records 5..5 missing"},
		{"delete the last record", exec(`DELETE FROM records WHERE seq = (SELECT max(seq) FROM records)`), 23, "signed head names record 24"},
		{"swap a signature", exec(`UPDATE records SET sig = (SELECT sig FROM records WHERE seq = 3) WHERE seq = 4`), 4, "bad signature"},
		{"reorder kinds", exec(`UPDATE records SET kind = 'event' WHERE seq = 2`), 2, "hash mismatch"},
		{"flip a byte in the file", func(db *sql.DB, path string) {
			db.Close()
			b, _ := os.ReadFile(path)
			i := bytes.Index(b, []byte("MEAS 0.8720"))
			if i < 0 {
				t.Fatal("raw line not found in file")
			}
			b[i+7] ^= 0x01 // '8' -> '9'
			os.WriteFile(path, b, 0o600)
		}, 8, "hash mismatch"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			rep := tamper(t, src, c.f)
			if rep.OK() {
				t.Fatal("verify passed a tampered journal")
			}
			p := rep.Problems[0]
			if p.Seq != c.seq || !strings.Contains(p.What, c.contain) || p.Hint == "" {
				t.Errorf("problem = %s; want record %d and %q", p, c.seq, c.contain)
			}
		})
	}
	if rep, err := Verify(ctx, src); err != nil || !rep.OK() {
		t.Errorf("original no longer verifies: %+v %v", rep, err)
	}
	// Not a journal at all.
	junk := filepath.Join(t.TempDir(), "junk.db")
	os.WriteFile(junk, []byte("hello, this is not a database file at all................................................................"), 0o600)
	if rep, err := Verify(ctx, junk); err != nil || rep.OK() || !strings.Contains(rep.Problems[0].What, "not a journal") {
		t.Errorf("junk file: %+v %v", rep, err)
	}
}

// goldenHash: `head -c -1 testdata/record.canonical | sha256sum` (GNU coreutils).
const goldenHash = "01dc9a494e468f16fc7ea1182e452d98cf71292e4df500386d642b6fce29a1d0"

func TestAppendAll(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	j := openTest(t, dir)
	id, _ := j.Begin(ctx, journaltest.Session(0))
	items := []Item{{Kind: entry.KindEvent, Payload: entry.Event{Name: "beam_on"}}, {Kind: entry.KindValue, Payload: entry.Value{Name: "kV", Value: 70}}}
	last, err := j.AppendAll(ctx, id, items)
	if err != nil || last != 3 {
		t.Fatalf("AppendAll = %d, %v", last, err)
	}
	if _, err := j.AppendAll(ctx, id, []Item{{Kind: entry.KindSessionEnd, Payload: entry.SessionEnd{}}, {Kind: entry.KindEvent, Payload: entry.Event{}}}); err == nil {
		t.Error("records after a session_end accepted")
	}
	if _, err := j.AppendAll(ctx, id, []Item{{Kind: entry.KindEvent, Payload: entry.Event{}}, {Kind: entry.KindEvent, Payload: func() {}}}); err == nil {
		t.Error("unencodable payload accepted")
	}
	if s, _ := j.Sessions(ctx); s[0].Last != 3 {
		t.Errorf("a refused AppendAll left records: last %d", s[0].Last)
	}
	j.Close()
	if rep, err := Verify(ctx, filepath.Join(dir, "journal.db")); err != nil || !rep.OK() {
		t.Errorf("verify: %+v %v", rep, err)
	}
}

func TestAppendJSONString(t *testing.T) {
	for _, s := range []string{"", "plain-id_09:.Z", "quote\"back\\slash", "<&>", "tab\there", "µGy/s", "\u2028", "del\x7f", "bad\xffutf8"} {
		got := appendJSONString([]byte("x"), s)
		want, _ := json.Marshal(s) // the reference: encoding/json
		if !bytes.Equal(got, append([]byte("x"), want...)) {
			t.Errorf("appendJSONString(%q) = %s, json.Marshal gives %s", s, got[1:], want)
		}
	}
}

// The append view's trigger refuses a record that does not follow its
// session's head in the file, whatever head the Journal believes (a stale
// cache, another writer): nothing of the append is written, single or
// burst, and the next append reads the head afresh and goes on. Without
// the trigger's check the records would be stored with a wrong prev link
// (a fork) and verify would fail.
func TestAppendRefusesStaleHead(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	j := openTest(t, dir)
	id, _ := j.Begin(ctx, journaltest.Session(0))
	if _, err := j.Append(ctx, id, entry.KindEvent, entry.Event{Name: "beam_on"}); err != nil {
		t.Fatal(err)
	}
	for _, items := range [][]Item{
		{{Kind: entry.KindEvent, Payload: entry.Event{Name: "x"}}},
		{{Kind: entry.KindEvent, Payload: entry.Event{Name: "x"}}, {Kind: entry.KindEvent, Payload: entry.Event{Name: "y"}}},
	} {
		for _, stale := range []headState{
			{seq: 2, hash: zeroHashHex()}, // another prev
			{seq: 1, hash: j.heads[id].hash},
		} {
			j.mu.Lock()
			j.heads[id] = stale
			j.mu.Unlock()
			if _, err := j.AppendAll(ctx, id, items); err == nil || !strings.Contains(err.Error(), "does not follow") {
				t.Errorf("%d records after a stale head %+v: err %v, want refused as not following the head", len(items), stale, err)
			}
		}
	}
	if s, _ := j.Sessions(ctx); s[0].Last != 2 {
		t.Errorf("refused appends left records: last %d, want 2", s[0].Last)
	}
	if seq, err := j.Append(ctx, id, entry.KindEvent, entry.Event{Name: "beam_off"}); err != nil || seq != 3 {
		t.Fatalf("append after the refusals = %d, %v; want 3", seq, err)
	}
	j.Close()
	if rep, err := Verify(ctx, filepath.Join(dir, "journal.db")); err != nil || !rep.OK() {
		t.Errorf("verify: %+v %v", rep, err)
	}
}

// Each session a board begins names, in its signed session record, the
// session begun before it: its id, its intensifier and the hash of its
// last record at that moment (the chain a store's check of deleted
// sessions follows); the board's first session names none.
func TestBeginNamesTheSessionBefore(t *testing.T) {
	ctx := context.Background()
	j := openTest(t, t.TempDir())
	defer j.Close()
	var ids []string
	for i := range 3 {
		s := journaltest.Session(i)
		s.IntensifierSerial = fmt.Sprintf("HV-%04d", 100+i)
		id, err := j.Begin(ctx, s)
		if err != nil {
			t.Fatal(err)
		}
		if err := journaltest.WriteSession(ctx, j, id, 1, i != 1, nil); err != nil {
			t.Fatal(err)
		}
		ids = append(ids, id)
	}
	ss, err := j.Sessions(ctx)
	if err != nil || len(ss) != 3 {
		t.Fatalf("sessions: %d %v", len(ss), err)
	}
	if p := ss[0].Session; p.PrevSession != "" || p.PrevSerial != "" || p.PrevHead != "" {
		t.Errorf("the first session names one before it: %q %q %q", p.PrevSession, p.PrevSerial, p.PrevHead)
	}
	for i := 1; i < 3; i++ {
		recs, err := j.Records(ctx, ids[i-1], 0, 0)
		if err != nil {
			t.Fatal(err)
		}
		s := ss[i].Session
		if s.PrevSession != ids[i-1] || s.PrevSerial != fmt.Sprintf("HV-%04d", 100+i-1) || s.PrevHead != recs[len(recs)-1].Hash {
			t.Errorf("session %d names %q (%q, %.12s), want %q (%q, %.12s)", i, s.PrevSession, s.PrevSerial, s.PrevHead, ids[i-1], fmt.Sprintf("HV-%04d", 100+i-1), recs[len(recs)-1].Hash)
		}
	}
	if rep, err := Verify(ctx, j.Path()); err != nil || !rep.OK() {
		t.Errorf("journal with linked sessions: %+v %v", rep, err)
	}
	// The middle session deleted whole from the file: every record and
	// head left verifies, and the next session names it.
	path := j.Path()
	j.Close()
	db, err := sql.Open("sqlite", path)
	if err != nil {
		t.Fatal(err)
	}
	for _, q := range []string{`DELETE FROM records WHERE session = ?`, `DELETE FROM heads WHERE session = ?`} {
		if _, err := db.Exec(q, ids[1]); err != nil {
			t.Fatal(err)
		}
	}
	db.Close()
	rep, err := Verify(ctx, path)
	if err != nil {
		t.Fatal(err)
	}
	if rep.OK() || len(rep.Problems) != 1 || rep.Problems[0].Session != ids[2] || !strings.Contains(rep.Problems[0].What, "names session "+ids[1]) {
		t.Errorf("a session deleted whole: problems %v, want one naming %s from %s", rep.Problems, ids[1], ids[2])
	}
}
