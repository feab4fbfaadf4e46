package live

import (
	"context"
	"encoding/json"
	"sync"
	"time"

	"kermalux/drivers/clock"
	"kermalux/procedures/engine"
	"kermalux/procedures/entry"
	"kermalux/procedures/panel"
)

// wire is what the page receives for each event: the shape of a journal
// envelope (entry.Envelope), so a record replayed from the journal and one
// published as it is appended read the same.
type wire struct {
	Seq     int64         `json:"seq,omitempty"`
	Kind    string        `json:"kind"`
	Mono    time.Duration `json:"mono_ns"`
	Wall    time.Time     `json:"wall"`
	Payload any           `json:"payload"`
}

// Journal is the engine's journal with a tee to the hub: each record is
// published after the journal has made it durable, so the page never shows
// what the journal does not hold.
type Journal struct {
	engine.Journal
	hub *Hub
	clk clock.Clock

	mu      sync.Mutex
	session string
}

// NewJournal wraps j.
func NewJournal(j engine.Journal, hub *Hub, clk clock.Clock) *Journal {
	return &Journal{Journal: j, hub: hub, clk: clk}
}

// Begin implements engine.Journal.
func (j *Journal) Begin(ctx context.Context, s entry.Session) (string, error) {
	id, err := j.Journal.Begin(ctx, s)
	if err != nil {
		return id, err
	}
	j.setSession(id)
	if j.hub.Watching() {
		// Begin writes the session's first records itself (the session
		// header, and a wrapper may add more): publish them as stored.
		envs, eerr := j.Journal.Envelopes(ctx, id)
		if eerr == nil {
			for _, e := range envs {
				if data, merr := json.Marshal(e); merr == nil {
					j.hub.Publish(Event{Seq: e.Seq, Session: id, Data: data})
				}
			}
		}
	}
	return id, nil
}

// Append implements engine.Journal.
func (j *Journal) Append(ctx context.Context, session string, kind entry.Kind, payload any) (int64, error) {
	seq, err := j.Journal.Append(ctx, session, kind, payload)
	if err != nil {
		return seq, err
	}
	j.setSession(session)
	if j.hub.Watching() {
		data, merr := json.Marshal(wire{Seq: seq, Kind: string(kind), Mono: j.clk.Mono(), Wall: j.clk.Now(), Payload: payload})
		if merr == nil {
			j.hub.Publish(Event{Seq: seq, Session: session, Data: data})
		}
	}
	return seq, nil
}

// AppendAll implements engine.Journal: the items are published one by
// one once the journal holds them all.
func (j *Journal) AppendAll(ctx context.Context, session string, items []entry.Item) (int64, error) {
	last, err := j.Journal.AppendAll(ctx, session, items)
	if err != nil {
		return last, err
	}
	j.setSession(session)
	if j.hub.Watching() {
		now, wall := j.clk.Mono(), j.clk.Now()
		for i, it := range items {
			seq := last - int64(len(items)-1-i)
			data, merr := json.Marshal(wire{Seq: seq, Kind: string(it.Kind), Mono: now, Wall: wall, Payload: it.Payload})
			if merr == nil {
				j.hub.Publish(Event{Seq: seq, Session: session, Data: data})
			}
		}
	}
	return last, nil
}

// Session is the session last begun or appended to ("" before any).
func (j *Journal) Session() string {
	j.mu.Lock()
	defer j.mu.Unlock()
	return j.session
}

func (j *Journal) setSession(id string) {
	j.mu.Lock()
	changed := j.session != id
	j.session = id
	j.mu.Unlock()
	if changed && j.hub.Watching() {
		data, _ := json.Marshal(wire{Kind: "live_session", Mono: j.clk.Mono(), Wall: j.clk.Now(), Payload: map[string]string{"id": id}})
		j.hub.Publish(Event{Session: id, Data: data})
	}
}

// Panel is the engine's panel with a tee to the hub. It publishes before
// passing each call on, so the page shows a prompt while the board waits
// for the operator.
type Panel struct {
	panel.Panel
	hub *Hub
	clk clock.Clock
}

// NewPanel wraps p.
func NewPanel(p panel.Panel, hub *Hub, clk clock.Clock) *Panel {
	return &Panel{Panel: p, hub: hub, clk: clk}
}

// Panel events, by kind.
type (
	panelSay struct {
		Text   string `json:"text"`
		Level  string `json:"level"`
		Action string `json:"action,omitempty"`
	}
	panelAsk struct {
		Text   string `json:"text"`
		Level  string `json:"level"`
		Action string `json:"action,omitempty"`
		Step   int    `json:"step"`
		Of     int    `json:"of"`
		StepID string `json:"step_id,omitempty"`
		Next   string `json:"next,omitempty"`
		Value  string `json:"value,omitempty"` // the value asked for, with its unit
	}
	panelIndicate struct {
		On string `json:"on"`
	}
)

func (p *Panel) publish(kind string, payload any) {
	if !p.hub.Watching() {
		return
	}
	data, err := json.Marshal(wire{Kind: kind, Mono: p.clk.Mono(), Wall: p.clk.Now(), Payload: payload})
	if err == nil {
		p.hub.Publish(Event{Data: data})
	}
}

// Say implements panel.Panel.
func (p *Panel) Say(ctx context.Context, m panel.Message) error {
	p.publish("panel_say", panelSay{Text: m.Text, Level: string(m.Level), Action: string(m.Action)})
	return p.Panel.Say(ctx, m)
}

// Ask implements panel.Panel.
func (p *Panel) Ask(ctx context.Context, pr panel.Prompt) (panel.Response, error) {
	if p.hub.Watching() {
		a := panelAsk{Text: pr.Text, Level: string(pr.Level), Action: string(pr.Action), Step: pr.Step, Of: pr.Of, StepID: pr.StepID, Next: pr.Next}
		if pr.Value != nil {
			a.Value = pr.Value.Name + " (" + pr.Value.Unit + ")"
		}
		p.publish("panel_ask", a)
	}
	r, err := p.Panel.Ask(ctx, pr)
	if p.hub.Watching() {
		p.publish("panel_answered", map[string]string{"answer": string(r.Answer)})
	}
	return r, err
}

// Indicate implements panel.Panel.
func (p *Panel) Indicate(ctx context.Context, on panel.Indicator) error {
	p.publish("panel_indicate", panelIndicate{On: string(on)})
	return p.Panel.Indicate(ctx, on)
}
