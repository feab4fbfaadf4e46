package engine

import (
	"context"
	"encoding/json"
	"testing"

	"kermalux/procedures/entry"
)

// FuzzRebuild: the resume's reader of the journal, fed a recorded
// session with one record's payload (or kind) replaced by arbitrary
// bytes, never panics, and never counts the pre-exposure checklist as
// acknowledged unless the records hold an acknowledgement of every line.
func FuzzRebuild(f *testing.F) {
	r, base := memCutSession()
	for _, i := range []int{0, 5, 8, 14, 15, 30, len(base) - 1} {
		f.Add(i, string(base[i%len(base)].Kind), []byte(base[i%len(base)].Payload))
	}
	f.Add(14, "step", []byte(`{"index":2,"of":8,"id":"safety","state":"done"}`))
	f.Fuzz(func(t *testing.T, i int, kind string, payload []byte) {
		if i < 0 {
			i = -i
		}
		envs := append([]entry.Envelope(nil), base...)
		i %= len(envs)
		envs[i].Kind, envs[i].Payload = entry.Kind(kind), payload
		st, err := rebuildFrom(t, r, envs)
		if err != nil || !st.checklist {
			return
		}
		acked := map[string]bool{}
		prompts := map[int64]string{}
		for _, env := range envs {
			switch env.Kind {
			case entry.KindPrompt:
				var p entry.Prompt
				if json.Unmarshal(env.Payload, &p) == nil && p.Action == "check" {
					prompts[env.Seq] = p.Text
				}
			case entry.KindAck:
				var a entry.Ack
				if json.Unmarshal(env.Payload, &a) == nil && a.Answer == "ack" {
					acked[prompts[a.PromptSeq]] = true
				}
			}
		}
		for _, item := range safetyItems {
			if !acked[item] {
				t.Fatalf("checklist counted as acknowledged without an answer to %q", item)
			}
		}
	})
}

// memCutSession is a conversion-factor session, in memory, cut by a power cut at its 80th
// record, with the rig that recorded it.
func memCutSession() (*rig, []entry.Envelope) {
	r := newRig(cfSteps())
	ctx, cancel := context.WithCancel(context.Background())
	r.jr.cutAfter, r.jr.cancel = 80, cancel
	sum, _ := r.run(ctx)
	return r, append([]entry.Envelope(nil), r.jr.sessions[sum.Session]...)
}

// rebuildFrom resumes r's configuration from envs and returns the state
// the resume rebuilt.
func rebuildFrom(t *testing.T, r *rig, envs []entry.Envelope) (*state, error) {
	t.Helper()
	j := newMemJournal(r.clk)
	j.sessions["s"] = envs
	cfg := r.cfg
	cfg.Journal, cfg.Resume = j, "s"
	e, err := New(cfg)
	if err != nil {
		t.Fatal(err)
	}
	st, _, err := e.rebuild(context.Background(), "s")
	return st, err
}
