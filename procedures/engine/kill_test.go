package engine

import (
	"context"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"testing"
	"time"

	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/panel/scripted"
	"kermalux/procedures/entry"
	"kermalux/procedures/panel"
)

const childEnv = "KERMALUX_ENGINE_KILL_CHILD"

// TestKillChild is the child of TestKilledAndResumed: it runs a session
// into the board journal until it is killed.
func TestKillChild(t *testing.T) {
	path := os.Getenv(childEnv)
	if path == "" {
		t.Skip("child of TestKilledAndResumed")
	}
	r := newRig(cfSteps())
	// Pace the child in real time so that a kill lands anywhere in it.
	r.pan = scripted.New(r.clk, scripted.WithResponder(func(p panel.Prompt) panel.Response {
		if p.Action == panel.ActBeamOn {
			r.phys.schedule(true, r.phys.onDelay)
		}
		return scripted.AckAll(p)
	}), scripted.OnSay(func(m panel.Message) {
		if m.Action == panel.ActBeamOff {
			r.phys.schedule(false, r.phys.offDelay)
		}
	}))
	r.cfg.Panel = r.pan
	jr, err := journal.Open(path, journal.Options{KeyDir: filepath.Join(filepath.Dir(path), "keys"), Clock: r.clk})
	if err != nil {
		t.Fatal(err)
	}
	r.cfg.Journal = jr
	if _, err := r.run(context.Background()); err != nil {
		t.Fatal(err)
	}
}

// A board killed (SIGKILL) at random moments of a session: every time,
// the journal verifies, the session is found unfinished (unless it had
// finished), and resuming it completes it with each measurement accepted
// exactly once.
func TestKilledAndResumed(t *testing.T) {
	if testing.Short() {
		t.Skip("re-executes the test binary")
	}
	for i, delay := range []time.Duration{30, 60, 90, 120, 160, 220} {
		dir := t.TempDir()
		path := filepath.Join(dir, "journal.db")
		cmd := exec.Command(os.Args[0], "-test.run", "^TestKillChild$")
		cmd.Env = append(os.Environ(), childEnv+"="+path)
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		time.Sleep(delay * time.Millisecond)
		_ = cmd.Process.Kill()
		_ = cmd.Wait()
		if _, err := os.Stat(path); err != nil {
			continue // killed before the journal existed
		}
		rep, err := journal.Verify(context.Background(), path)
		if err != nil || !rep.OK() {
			t.Fatalf("kill %d: verify: %v %+v", i, err, rep.Problems)
		}
		jr, err := journal.Open(path, journal.Options{KeyDir: filepath.Join(dir, "keys")})
		if err != nil {
			t.Fatal(err)
		}
		un, err := jr.Unfinished(context.Background())
		if err != nil {
			t.Fatal(err)
		}
		ss, _ := jr.Sessions(context.Background())
		if len(un) == 0 {
			t.Logf("kill %d after %s: nothing to resume (%d sessions)", i, delay*time.Millisecond, len(ss))
			jr.Close()
			if len(ss) > 1 {
				t.Fatalf("kill %d: %d sessions", i, len(ss))
			}
			continue // finished before the kill, or killed before Begin
		}
		r := newRig(cfSteps())
		r.cfg.Journal = jr
		r.cfg.Resume = un[0].ID
		sum, err := r.run(context.Background())
		if err != nil {
			t.Fatalf("kill %d: resume: %v", i, err)
		}
		envs, _ := jr.Envelopes(context.Background(), sum.Session)
		n := 0
		for _, e := range envs {
			if e.Kind == entry.KindEvent && containsName(e.Payload, evMeasured) {
				n++
			}
		}
		jr.Close()
		t.Logf("kill %d after %s: resumed from record %d", i, delay*time.Millisecond, un[0].Last)
		if n != 2 || sum.Outcome != "complete" {
			t.Errorf("kill %d after %s: %d measurements accepted, outcome %s", i, fmt.Sprint(delay*time.Millisecond), n, sum.Outcome)
		}
		rep, err = journal.Verify(context.Background(), path)
		if err != nil || !rep.OK() {
			t.Fatalf("kill %d: verify after resume: %v %+v", i, err, rep.Problems)
		}
	}
}
