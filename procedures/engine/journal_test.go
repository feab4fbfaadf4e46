package engine

import (
	"context"
	"database/sql"
	"encoding/json"
	"errors"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"kermalux/firmware-host/journal"
	"kermalux/procedures/entry"
	"kermalux/procedures/panel"
)

// cutJournal wraps the board journal: the append numbered cut is refused
// and the run's context cancelled, as a power cut would end the process.
type cutJournal struct {
	*journal.Journal
	n, cut int
	cancel context.CancelFunc
}

func (c *cutJournal) Append(ctx context.Context, s string, k entry.Kind, p any) (int64, error) {
	c.n++
	if c.cut > 0 && c.n == c.cut {
		c.cancel()
		return 0, context.Canceled
	}
	return c.Journal.Append(ctx, s, k, p)
}

// AppendAll appends one record at a time, so the cut falls on a record
// as it did before readings were batched.
func (c *cutJournal) AppendAll(ctx context.Context, s string, items []entry.Item) (int64, error) {
	var last int64
	for _, it := range items {
		seq, err := c.Append(ctx, s, it.Kind, it.Payload)
		if err != nil {
			return last, err
		}
		last = seq
	}
	return last, nil
}

// cutSession runs cfSteps on a board journal at dir until the append
// numbered cut (the process dies there), on boot "boot-a", and returns the
// rig and the interrupted session's id.
func cutSession(t *testing.T, dir string, cut int) (*rig, string) {
	t.Helper()
	r := newRig(cfSteps())
	r.cfg.BootID = "boot-a"
	jr, err := journal.Open(filepath.Join(dir, "journal.db"), journal.Options{KeyDir: filepath.Join(dir, "keys"), Clock: r.clk, BootID: func() string { return "boot-a" }})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	r.cfg.Journal = &cutJournal{Journal: jr, cut: cut, cancel: cancel}
	sum, err := r.run(ctx)
	cancel()
	if err == nil {
		t.Fatal("run not interrupted")
	}
	jr.Close()
	r.phys.schedule(false, 0)
	return r, sum.Session
}

// reopen opens the board journal of dir again, on boot.
func reopen(t *testing.T, r *rig, dir, boot string) *journal.Journal {
	t.Helper()
	jr, err := journal.Open(filepath.Join(dir, "journal.db"), journal.Options{KeyDir: filepath.Join(dir, "keys"), Clock: r.clk, BootID: func() string { return boot }})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { jr.Close() })
	r.cfg.Journal = jr
	r.cfg.BootID = boot
	return jr
}

// With the real board journal (SQLite, hash-chained, signed): a run cut
// in the middle of the conversion factor measurement leaves an unfinished
// session; reopening the file and resuming it completes the session with
// each measurement taken once, and the journal still verifies. On the
// same boot and soon after, the checklist is not asked again; after a
// restart of the board (another boot id) or a long idle time it is asked
// again, journalled as a retake with the reason, before any beam prompt.
func TestResumeWithBoardJournal(t *testing.T) {
	for _, tc := range []struct {
		name    string
		boot    string
		idle    time.Duration
		recheck string // "" : checklist not asked again; else the reason journalled
	}{
		{"same boot", "boot-a", time.Minute, ""},
		{"restarted", "boot-b", time.Minute, "the board was restarted"},
		{"idle", "boot-a", 11 * time.Minute, "the session was idle for 11 minutes"},
		{"unknown boot, idle", "unknown", 11 * time.Minute, "idle for 11 minutes"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			dir := t.TempDir()
			r, id := cutSession(t, dir, 90)
			r.clk.Advance(tc.idle)
			jr := reopen(t, r, dir, tc.boot)
			un, err := jr.Unfinished(context.Background())
			if err != nil || len(un) != 1 || un[0].ID != id {
				t.Fatalf("unfinished %v, %v", un, err)
			}
			r.cfg.Resume = id
			checksBefore := countAction(r, panel.ActCheck)
			promptsBefore := len(r.pan.Prompts())
			sum2, err := r.run(context.Background())
			if err != nil {
				t.Fatal(err)
			}
			if sum2.Outcome != "complete" || len(sum2.Results) != 1 {
				t.Fatalf("outcome %s, %d results", sum2.Outcome, len(sum2.Results))
			}
			asked := countAction(r, panel.ActCheck) - checksBefore
			if tc.recheck == "" && asked != 0 {
				t.Errorf("checklist asked again (%d lines) after a resume on the same boot", asked)
			}
			if tc.recheck != "" {
				if asked != len(safetyItems) {
					t.Errorf("%d checklist lines asked again, want %d", asked, len(safetyItems))
				}
				// Every line again before the first beam prompt of the resume.
				n := 0
				for _, p := range r.pan.Prompts()[promptsBefore:] {
					if p.Action == panel.ActCheck {
						n++
					}
					if p.Action == panel.ActBeamOn && n < len(safetyItems) {
						t.Fatalf("beam prompt after %d of %d checklist lines", n, len(safetyItems))
					}
				}
			}
			envs, err := jr.Envelopes(context.Background(), id)
			if err != nil {
				t.Fatal(err)
			}
			measured, retakes := 0, 0
			for _, e := range envs {
				if e.Kind == entry.KindEvent && containsName(e.Payload, evMeasured) {
					measured++
				}
				if e.Kind == entry.KindStep && strings.Contains(string(e.Payload), `"state":"retake"`) && strings.Contains(string(e.Payload), `"id":"safety"`) {
					retakes++
					if tc.recheck == "" || !strings.Contains(string(e.Payload), tc.recheck) {
						t.Errorf("checklist retake %s, want reason %q", e.Payload, tc.recheck)
					}
				}
			}
			if tc.recheck != "" && retakes != 1 {
				t.Errorf("%d checklist retakes journalled, want 1", retakes)
			}
			if measured != 2 { // the dark reading and the conversion factor reading
				t.Errorf("%d measurements accepted, want 2", measured)
			}
			rep, err := journal.Verify(context.Background(), filepath.Join(dir, "journal.db"))
			if err != nil || !rep.OK() {
				t.Fatalf("verify: %v (%+v)", err, rep.Problems)
			}
			if len(rep.Unfinished) != 0 {
				t.Errorf("still unfinished: %v", rep.Unfinished)
			}
		})
	}
}

// A session that does not verify is not resumed: a record edited after
// the kill (a dark reading multiplied by 1000), a record deleted, the
// signed head deleted make run refuse, naming the record, before anything
// is said or asked. (Records cut from the end are refused earlier, when
// the journal is opened: its high-water mark names them.)
func TestResumeRefusesTamperedJournal(t *testing.T) {
	for _, tc := range []struct {
		name, sql, want string
	}{
		{"dark edited", `UPDATE records SET payload = replace(payload, '\"mean\":', '\"mean\":1000') WHERE kind = 'event' AND payload LIKE '%measurement_done%'`, "hash mismatch"},
		{"record deleted", `DELETE FROM records WHERE seq = 5`, "missing"},
		{"head deleted", `DELETE FROM heads`, "no signed session head"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			dir := t.TempDir()
			r, id := cutSession(t, dir, 90)
			db, err := sql.Open("sqlite", filepath.Join(dir, "journal.db"))
			if err != nil {
				t.Fatal(err)
			}
			res, err := db.Exec(tc.sql)
			if err != nil {
				t.Fatal(err)
			}
			if n, _ := res.RowsAffected(); n != 1 {
				t.Fatalf("%d rows changed", n)
			}
			db.Close()
			reopen(t, r, dir, "boot-a")
			r.cfg.Resume = id
			prompts := len(r.pan.Prompts())
			_, err = r.run(context.Background())
			var ve *journal.VerifyError
			if !errors.As(err, &ve) || !errors.Is(err, journal.ErrNotVerified) {
				t.Fatalf("resume of a tampered journal: %v", err)
			}
			if !strings.Contains(err.Error(), tc.want) || !strings.Contains(err.Error(), "record ") {
				t.Errorf("error %q does not name the record and %q", err, tc.want)
			}
			if n := len(r.pan.Prompts()); n != prompts {
				t.Errorf("%d prompts after refusing", n-prompts)
			}
		})
	}
}

// A checklist whose done record is in the journal but whose lines were
// never acknowledged (a forged record signed with a stolen key is the
// only way, since the journal verifies) is asked again, line by line,
// before any beam prompt.
func TestResumeAsksChecklistWithoutAcks(t *testing.T) {
	r := newRig(cfSteps())
	ctx := context.Background()
	id, err := r.jr.Begin(context.Background(), entry.Session{Procedure: "test"})
	if err != nil {
		t.Fatal(err)
	}
	steps := cfSteps()
	// A session whose checklist step says done after only one answer.
	for _, rec := range []struct {
		k entry.Kind
		p any
	}{
		{entry.KindStep, entry.Step{Index: 1, Of: len(steps), ID: "hello", State: entry.StepStarted}},
		{entry.KindStep, entry.Step{Index: 1, Of: len(steps), ID: "hello", State: entry.StepDone}},
		{entry.KindStep, entry.Step{Index: 2, Of: len(steps), ID: "safety", State: entry.StepStarted}},
		{entry.KindPrompt, entry.Prompt{Step: 2, Action: string(panel.ActCheck), Text: safetyItems[0], Asked: true}},
		{entry.KindAck, entry.Ack{Step: 2, PromptSeq: 5, Answer: string(panel.Ack), Text: safetyItems[0]}},
		{entry.KindStep, entry.Step{Index: 2, Of: len(steps), ID: "safety", State: entry.StepDone}},
	} {
		if _, err := r.jr.Append(ctx, id, rec.k, rec.p); err != nil {
			t.Fatal(err)
		}
	}
	r.cfg.Resume = id
	sum, err := r.run(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if sum.Outcome != "complete" {
		t.Fatalf("outcome %s", sum.Outcome)
	}
	n := 0
	for _, p := range r.pan.Prompts() {
		if p.Action == panel.ActCheck {
			n++
		}
		if p.Action == panel.ActBeamOn && n < len(safetyItems) {
			t.Fatalf("beam prompt after %d of %d checklist lines", n, len(safetyItems))
		}
	}
	if n != len(safetyItems) {
		t.Errorf("%d checklist lines asked, want %d", n, len(safetyItems))
	}
	var retake []entry.Step
	for _, s := range records[entry.Step](r.jr, id, entry.KindStep) {
		if s.ID == "safety" && s.State == entry.StepRetake {
			retake = append(retake, s)
		}
	}
	if len(retake) != 1 || !strings.Contains(retake[0].Reason, "3 of its 4 lines") {
		t.Errorf("retake records %+v", retake)
	}
}

// A journal that does not verify: the fake's verification error stops
// the resume before anything is said.
func TestResumeStopsWhenVerifyFails(t *testing.T) {
	r := newRig(cfSteps())
	id, _ := r.jr.Begin(context.Background(), entry.Session{Procedure: "test"})
	r.jr.verifyErr = &journal.VerifyError{Path: "j", Problem: journal.Problem{Session: id, Seq: 3, Kind: entry.KindStep, What: "hash mismatch"}}
	r.cfg.Resume = id
	_, err := r.run(context.Background())
	if !errors.Is(err, journal.ErrNotVerified) || !strings.Contains(err.Error(), "record 3 (step)") {
		t.Fatalf("err %v", err)
	}
	if len(r.pan.Messages())+len(r.pan.Prompts()) != 0 {
		t.Error("spoke before refusing")
	}
}

func countAction(r *rig, a panel.Action) int {
	n := 0
	for _, p := range r.pan.Prompts() {
		if p.Action == a {
			n++
		}
	}
	return n
}

func containsName(payload []byte, name string) bool {
	return strings.Contains(string(payload), `"name":"`+name+`"`)
}

// Config.Warnings (a kerma ceiling set above the default) are said as
// warnings before the first step, and journalled, on every run.
func TestSettingWarningsSpokenAndJournalled(t *testing.T) {
	r := newRig(cfSteps())
	r.cfg.Warnings = []string{"Caution: the kerma rate ceiling is set to 80 micrograys per second, above the default of 50."}
	sum, err := r.run(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	msgs := r.pan.Messages()
	if len(msgs) < 2 || msgs[1].Level != panel.Warn || msgs[1].Text != r.cfg.Warnings[0] {
		t.Errorf("messages %+v", msgs[:min(3, len(msgs))])
	}
	if ev := events(r.jr, sum.Session, evSettingWarning); len(ev) != 1 || ev[0].Detail != r.cfg.Warnings[0] {
		t.Errorf("events %+v", ev)
	}
}

// A journal written before the statistics were kept by role (fixed
// luminance and kerma fields) resumes with the same statistics: a
// position of a real run, written back in the older shape, reads into
// the same Meters.
func TestOlderPositionShapeMigrates(t *testing.T) {
	r := newRig(cfSteps())
	sum, err := r.run(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	p := r.jrPos(t, sum.Session, "cf@32cm")
	l, k := p.Meters[Photometer], p.Meters[Dosimeter]
	if l.N == 0 || k.N == 0 {
		t.Fatalf("position without both meters: %+v", p.Meters)
	}
	// The older release's field names (state.go before Meters).
	old := map[string]any{"step": p.Step, "index": p.Index, "calibrated": p.Calib,
		"has_l": true, "l": l.Mean, "l_u": l.U, "l_b": l.B, "n_l": l.N,
		"has_k": true, "k": k.Mean, "k_u": k.U, "k_b": k.B, "n_k": k.N,
		"has_g": p.HasG, "g": p.G, "g_u": p.GU, "n_g": p.NG}
	data, err := json.Marshal(old)
	if err != nil {
		t.Fatal(err)
	}
	var q positionStats
	if err := json.Unmarshal(data, &q); err != nil {
		t.Fatal(err)
	}
	q.migrate()
	l.Span, k.Span = 0, 0 // the older shape had no span
	if q.Meters[Photometer] != l || q.Meters[Dosimeter] != k {
		t.Errorf("migrated %+v, want photometer %+v and dosimeter %+v", q.Meters, l, k)
	}
	if q.count() != p.count() {
		t.Errorf("count %d after migration, %d before", q.count(), p.count())
	}
	// A position of the new shape is left as it is, and writes no old field.
	q.migrate()
	out, _ := json.Marshal(q)
	if strings.Contains(string(out), `"has_l"`) || strings.Contains(string(out), `"n_k"`) {
		t.Errorf("old fields written again: %s", out)
	}
}
