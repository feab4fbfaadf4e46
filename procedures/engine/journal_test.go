package engine

import (
	"context"
	"path/filepath"
	"strings"
	"testing"

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

// With the real board journal (SQLite, hash-chained, signed): a run cut
// in the middle of the conversion factor measurement leaves an unfinished
// session; reopening the file and resuming it completes the session with
// each measurement taken once, and the journal still verifies.
func TestResumeWithBoardJournal(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "journal.db")
	r := newRig(cfSteps())
	jr, err := journal.Open(path, journal.Options{KeyDir: filepath.Join(dir, "keys"), Clock: r.clk, BootID: func() string { return "boot-a" }})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	cj := &cutJournal{Journal: jr, cut: 60, cancel: cancel}
	r.cfg.Journal = cj
	sum, err := r.run(ctx)
	cancel()
	if err == nil {
		t.Fatal("run not interrupted")
	}
	jr.Close()
	r.phys.schedule(false, 0)

	jr, err = journal.Open(path, journal.Options{KeyDir: filepath.Join(dir, "keys"), Clock: r.clk, BootID: func() string { return "boot-b" }})
	if err != nil {
		t.Fatal(err)
	}
	defer jr.Close()
	un, err := jr.Unfinished(context.Background())
	if err != nil || len(un) != 1 || un[0].ID != sum.Session {
		t.Fatalf("unfinished %v, %v", un, err)
	}
	r.cfg.Journal = jr
	r.cfg.Resume = sum.Session
	checksBefore := countAction(r, panel.ActCheck)
	sum2, err := r.run(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if sum2.Outcome != "complete" || len(sum2.Results) != 1 {
		t.Fatalf("outcome %s, %d results", sum2.Outcome, len(sum2.Results))
	}
	if countAction(r, panel.ActCheck) != checksBefore {
		t.Error("checklist asked again after the resume")
	}
	envs, err := jr.Envelopes(context.Background(), sum.Session)
	if err != nil {
		t.Fatal(err)
	}
	measured := 0
	for _, e := range envs {
		if e.Kind == entry.KindEvent && containsName(e.Payload, evMeasured) {
			measured++
		}
	}
	if measured != 2 { // the dark reading and the conversion factor reading
		t.Errorf("%d measurements accepted, want 2", measured)
	}
	rep, err := journal.Verify(context.Background(), path)
	if err != nil || !rep.OK() {
		t.Fatalf("verify: %v (%+v)", err, rep.Problems)
	}
	if len(rep.Unfinished) != 0 {
		t.Errorf("still unfinished: %v", rep.Unfinished)
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
