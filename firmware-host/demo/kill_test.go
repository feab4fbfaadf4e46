package demo

import (
	"context"
	"encoding/json"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"kermalux/firmware-host/journal"
	"kermalux/procedures/entry"
)

const (
	killOutEnv = "KERMALUX_DEMO_KILL_OUT" // the child's --out folder
	killAtEnv  = "KERMALUX_DEMO_KILL_AT"  // "kind:N": SIGKILL after the Nth record of kind; empty: run to the end
)

func TestMain(m *testing.M) {
	if out := os.Getenv(killOutEnv); out != "" {
		os.Exit(killChild(out, os.Getenv(killAtEnv)))
	}
	os.Exit(m.Run())
}

// killChild runs the demo's conversion factor sequence on out, and kills
// itself with SIGKILL right after the record named by at is durable, as a
// power cut at that journal event would.
func killChild(out, at string) int {
	var kind entry.Kind
	n := 0
	if at != "" {
		k, c, _ := strings.Cut(at, ":")
		kind = entry.Kind(k)
		n, _ = strconv.Atoi(c)
	}
	seen := map[entry.Kind]int{}
	o := Options{Out: out, Procedure: "conversion-factor", Speed: 40, Version: "kill-test", Hurried: true,
		OnRecord: func(k entry.Kind, seq int64) {
			seen[k]++
			if k == kind && seen[k] == n {
				syscall.Kill(os.Getpid(), syscall.SIGKILL)
				select {} // the signal is on its way
			}
		}}
	got, err := Run(context.Background(), o)
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 1
	}
	if got.Summary.Outcome != "complete" {
		fmt.Fprintln(os.Stderr, "outcome", got.Summary.Outcome)
		return 1
	}
	return 0
}

func runChild(t *testing.T, out, at string) (killed bool, stderr string) {
	killed, stderr, _ = runChildPid(t, out, at)
	return killed, stderr
}

func runChildPid(t *testing.T, out, at string) (killed bool, stderr string, pid int) {
	t.Helper()
	cmd := exec.Command(os.Args[0], "-test.run=^$")
	cmd.Env = append(os.Environ(), killOutEnv+"="+out, killAtEnv+"="+at)
	var e strings.Builder
	cmd.Stderr = &e
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	pid = cmd.Process.Pid
	err := cmd.Wait()
	if ws, ok := cmd.ProcessState.Sys().(syscall.WaitStatus); ok && ws.Signaled() && ws.Signal() == syscall.SIGKILL {
		return true, e.String(), pid
	}
	if err != nil {
		t.Fatalf("child at %q: %v\n%s", at, err, e.String())
	}
	return false, e.String(), pid
}

// sessionRecords reads every record of the journal in out, by session.
func sessionRecords(t *testing.T, out string) (map[string][]journal.Record, []string) {
	t.Helper()
	recs := map[string][]journal.Record{}
	var order []string
	err := journal.Export(context.Background(), filepath.Join(out, "journal.db"), func(r journal.Record) error {
		if _, ok := recs[r.Session]; !ok {
			order = append(order, r.Session)
		}
		recs[r.Session] = append(recs[r.Session], r)
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return recs, order
}

// The SIGKILL campaign, kept: `demo` killed at journal events (after the
// Nth record of a kind: a checklist answer, a reading early and late in
// the beam, a measurement accepted, a result, a step), then run again on
// the same --out folder. Each time: the journal verifies after the kill;
// the rerun resumes the same session (a "resumed" step record, no second
// session) and completes it; the records written before the kill are an
// unchanged prefix; no measurement is accepted twice; the simulator's
// folder of the killed run is cleaned up by the next.
func TestDemoKilledAtJournalEventsResumes(t *testing.T) {
	if testing.Short() {
		t.Skip("re-executes the test binary for a demo per kill")
	}
	points := []string{"ack:2", "reading:20", "reading:120", "event:6", "result:1", "step:14"}
	resumed := 0
	for _, at := range points {
		t.Run(at, func(t *testing.T) {
			out := t.TempDir()
			killed, errs, pid := runChildPid(t, out, at)
			if left, _ := filepath.Glob(filepath.Join(os.TempDir(), fmt.Sprintf("kermalux-demo-sim-%d-*", pid))); len(left) == 0 {
				t.Errorf("no simulator folder of the killed demo: the clean-up check proves nothing")
			}
			if !killed {
				t.Fatalf("the demo finished before %s: the kill point no longer exists (%s)", at, errs)
			}
			rep, err := journal.Verify(context.Background(), filepath.Join(out, "journal.db"))
			if err != nil || !rep.OK() || len(rep.Unfinished) != 1 {
				t.Fatalf("after the kill: %+v %v", rep, err)
			}
			before, order := sessionRecords(t, out)
			id := order[0]
			last := before[id][len(before[id])-1]
			kind, _, _ := strings.Cut(at, ":")
			if string(last.Kind) != kind {
				t.Errorf("killed after a %s record, want right after the %s", last.Kind, at)
			}
			if killed, errs := runChild(t, out, ""); killed {
				t.Fatalf("the rerun was killed: %s", errs)
			}
			if left, _ := filepath.Glob(filepath.Join(os.TempDir(), fmt.Sprintf("kermalux-demo-sim-%d-*", pid))); len(left) != 0 {
				t.Errorf("simulator folder %v of the killed demo left behind by the next", left)
			}
			after, order2 := sessionRecords(t, out)
			if len(order2) != 1 || order2[0] != id {
				t.Fatalf("sessions after the rerun %v, want the killed one resumed", order2)
			}
			recs := after[id]
			for i, r := range before[id] {
				if recs[i].Hash != r.Hash {
					t.Fatalf("record %d changed by the resume", r.Seq)
				}
			}
			measured := map[string]int{}
			sawResumed, ended := false, false
			for _, r := range recs[len(before[id]):] {
				var st entry.Step
				if r.Kind == entry.KindStep && json.Unmarshal(r.Payload, &st) == nil && st.State == entry.StepResumed {
					sawResumed = true
				}
				ended = ended || r.Kind == entry.KindSessionEnd
			}
			for _, r := range recs {
				var ev entry.Event
				if r.Kind == entry.KindEvent && json.Unmarshal(r.Payload, &ev) == nil && ev.Name == "measurement_done" {
					var p struct {
						Step  string `json:"step"`
						Index int    `json:"index"`
					}
					json.Unmarshal([]byte(ev.Detail), &p)
					measured[fmt.Sprintf("%s/%d", p.Step, p.Index)]++
				}
			}
			for k, n := range measured {
				if n != 1 {
					t.Errorf("measurement %s accepted %d times", k, n)
				}
			}
			if !sawResumed || !ended {
				t.Fatalf("resumed record %v, session ended %v", sawResumed, ended)
			}
			if rep, err := journal.Verify(context.Background(), filepath.Join(out, "journal.db")); err != nil || !rep.OK() || len(rep.Unfinished) != 0 {
				t.Fatalf("after the resume: %+v %v", rep, err)
			}
			resumed++
			t.Logf("killed at %s (record %d), resumed, %d records in all, %d measurements", at, last.Seq, len(recs), len(measured))
		})
	}
	if resumed != len(points) {
		t.Errorf("%d of %d kills resumed", resumed, len(points))
	}
}

// The dialogue clock rounds once: 7 min 59.96 s is 08:00.0.
func TestClockText(t *testing.T) {
	for _, c := range []struct {
		d    time.Duration
		want string
	}{
		{7*time.Minute + 59960*time.Millisecond, "08:00.0"},
		{7*time.Minute + 59940*time.Millisecond, "07:59.9"},
		{0, "00:00.0"},
		{61*time.Second + 50*time.Millisecond, "01:01.1"},
	} {
		if got := clockText(c.d); got != c.want {
			t.Errorf("clockText(%s) = %s, want %s", c.d, got, c.want)
		}
	}
}
