package engine

import (
	"context"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"

	"kermalux/firmware-host/journal"
	"kermalux/procedures/entry"
)

const (
	childEnv  = "KERMALUX_ENGINE_KILL_CHILD" // the child's journal path
	killAtEnv = "KERMALUX_ENGINE_KILL_AT"    // "kind:N": SIGKILL right after the Nth record of kind
)

// killingJournal kills its process (SIGKILL, as a power cut would end it)
// right after the Nth record of a kind is durable.
type killingJournal struct {
	*journal.Journal
	kind   entry.Kind
	n      int
	counts map[entry.Kind]int
}

func (k *killingJournal) Append(ctx context.Context, s string, kind entry.Kind, p any) (int64, error) {
	seq, err := k.Journal.Append(ctx, s, kind, p)
	if err == nil {
		k.saw(kind)
	}
	return seq, err
}

// AppendAll kills after the write that made the Nth record durable.
func (k *killingJournal) AppendAll(ctx context.Context, s string, items []entry.Item) (int64, error) {
	seq, err := k.Journal.AppendAll(ctx, s, items)
	if err == nil {
		for _, it := range items {
			k.saw(it.Kind)
		}
	}
	return seq, err
}

func (k *killingJournal) saw(kind entry.Kind) {
	k.counts[kind]++
	if kind == k.kind && k.counts[kind] == k.n {
		syscall.Kill(os.Getpid(), syscall.SIGKILL)
		select {}
	}
}

// TestKillChild is the child of TestKilledAndResumed: it runs a session
// into the board journal and is killed at the journal event it is given.
func TestKillChild(t *testing.T) {
	path := os.Getenv(childEnv)
	if path == "" {
		t.Skip("child of TestKilledAndResumed")
	}
	r := newRig(cfSteps())
	jr, err := journal.Open(path, journal.Options{KeyDir: filepath.Join(filepath.Dir(path), "keys"), Clock: r.clk})
	if err != nil {
		t.Fatal(err)
	}
	k, c, _ := strings.Cut(os.Getenv(killAtEnv), ":")
	n, _ := strconv.Atoi(c)
	r.cfg.Journal = &killingJournal{Journal: jr, kind: entry.Kind(k), n: n, counts: map[entry.Kind]int{}}
	if _, err := r.run(context.Background()); err != nil {
		t.Fatal(err)
	}
}

// A board killed (SIGKILL) at journal events of a session (a checklist
// answer, the first and a late reading, the dark measurement accepted,
// the beam on, a step record): every time the journal verifies, the
// session is unfinished, and resuming it completes it with the earlier
// records an unchanged prefix and each measurement accepted exactly once.
// A kill that no longer lands (the event is gone) fails the test: no
// vacuous passes.
func TestKilledAndResumed(t *testing.T) {
	if testing.Short() {
		t.Skip("re-executes the test binary")
	}
	for _, at := range []string{"ack:3", "reading:1", "reading:40", "event:1", "event:3", "step:9", "prompt:9"} {
		t.Run(at, func(t *testing.T) {
			dir := t.TempDir()
			path := filepath.Join(dir, "journal.db")
			cmd := exec.Command(os.Args[0], "-test.run", "^TestKillChild$")
			cmd.Env = append(os.Environ(), childEnv+"="+path, killAtEnv+"="+at)
			var out strings.Builder
			cmd.Stdout, cmd.Stderr = &out, &out
			_ = cmd.Run()
			if ws, ok := cmd.ProcessState.Sys().(syscall.WaitStatus); !ok || !ws.Signaled() {
				t.Fatalf("the child was not killed at %s: %s", at, out.String())
			}
			ctx := context.Background()
			rep, err := journal.Verify(ctx, path)
			if err != nil || !rep.OK() || len(rep.Unfinished) != 1 {
				t.Fatalf("verify after the kill: %v %+v", err, rep)
			}
			jr, err := journal.Open(path, journal.Options{KeyDir: filepath.Join(dir, "keys")})
			if err != nil {
				t.Fatal(err)
			}
			defer jr.Close()
			un, err := jr.Unfinished(ctx)
			if err != nil || len(un) != 1 {
				t.Fatalf("unfinished %v %v", un, err)
			}
			before, _ := jr.Records(ctx, un[0].ID, 0, 0)
			kind, _, _ := strings.Cut(at, ":")
			if last := before[len(before)-1]; string(last.Kind) != kind {
				t.Errorf("the journal ends with a %s record, want the %s the kill came after", last.Kind, at)
			}
			r := newRig(cfSteps())
			r.cfg.Journal = jr
			r.cfg.Resume = un[0].ID
			sum, err := r.run(ctx)
			if err != nil || sum.Outcome != "complete" || sum.Session != un[0].ID {
				t.Fatalf("resume: %v, outcome %s", err, sum.Outcome)
			}
			after, _ := jr.Records(ctx, un[0].ID, 0, 0)
			for i, rec := range before {
				if after[i].Hash != rec.Hash {
					t.Fatalf("record %d changed by the resume", rec.Seq)
				}
			}
			n, resumed := 0, false
			for _, rec := range after {
				if rec.Kind == entry.KindEvent && containsName(rec.Payload, evMeasured) {
					n++
				}
				resumed = resumed || (rec.Seq > int64(len(before)) && rec.Kind == entry.KindStep && strings.Contains(string(rec.Payload), `"state":"resumed"`))
			}
			if n != 2 || !resumed {
				t.Errorf("%d measurements accepted (want 2, the dark and the conversion factor), resumed record %v", n, resumed)
			}
			if rep, err := journal.Verify(ctx, path); err != nil || !rep.OK() || len(rep.Unfinished) != 0 {
				t.Fatalf("verify after the resume: %v %+v", err, rep)
			}
			t.Logf("killed after record %d (%s), resumed to record %d", len(before), at, len(after))
		})
	}
}
