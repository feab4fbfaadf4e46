package demo

import (
	"context"
	"embed"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"sync"
	"syscall"
	"time"
	"unicode/utf8"

	"kermalux/calib"
	"kermalux/drivers/benchsim"
	"kermalux/drivers/clock"
	"kermalux/firmware-host/bench"
	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/panel/scripted"
	"kermalux/procedures/engine"
	"kermalux/procedures/entry"
	"kermalux/procedures/panel"
)

// assets are the demo's own copies of the invented example files under
// testdata/ (profiles, certificates, the default scenario, last year's
// results for the default intensifier), so the demo runs from any
// directory. A test keeps them identical to testdata/.
//
//go:embed assets
var assets embed.FS

// DefaultScenario names the embedded scenario used when none is given.
const DefaultScenario = "tollemby-rise-room2.yaml"

// Options configure a demo run.
type Options struct {
	Out       string  // directory for results.json, the journal, the bench file and the report
	Scenario  string  // scenario file; empty: the embedded default
	Seed      int64   // overrides the scenario's seed when HasSeed
	HasSeed   bool    //
	Speed     float64 // clock speed × real time; 0: the scenario's (20 if it says none)
	Procedure string  // procedure to run; empty: the acceptance sequence
	Version   string
	// Render writes the session's report from the journal into dir and
	// returns the files written; nil writes no report (a board build: the
	// report is rendered at the office from the synced journal).
	Render func(ctx context.Context, journal, session, dir string) ([]string, error)
	// Dialogue receives what the board says and asks, as it happens
	// (nil: nothing is printed).
	Dialogue io.Writer
	// Hook, when set, is called with the running bench and clock before the
	// session starts (tests use it to inject events).
	Hook func(b *benchsim.Bench, clk clock.Clock)
	// OnRecord, when set, is called after each record the engine appends
	// is durable (tests kill the process at chosen records with it).
	OnRecord func(kind entry.Kind, seq int64)
	// Wrap, when set, wraps the journal and the panel the engine is given
	// (the live view's tees: `kermalux demo --live`); proc is the
	// procedure that will run.
	Wrap func(j engine.Journal, p panel.Panel, clk clock.Clock, proc engine.Procedure) (engine.Journal, panel.Panel, error)
	// Fresh starts a new session even when the journal in Out holds an
	// unfinished one of the same procedure and intensifier; by default
	// that session is resumed, as on the board.
	Fresh bool
	// Language is the language the board speaks (`kermalux demo
	// --language`); empty: English.
	Language string
	// RoomAir simulates the bench's room-air sensor at the scenario's air
	// (`kermalux demo --room-air`): temperature and pressure are read, not entered.
	RoomAir bool
	// Hurried: the simulated operator answers every prompt after a
	// reaction time only, with no time to listen, set up or read off
	// (tests that need speed); by default it takes the times of Delays.
	Hurried bool
}

// EngineerTarget is the engineer's time a whole visit should take at most:
// fifteen minutes at the intensifier (the project's target).
const EngineerTarget = 15 * time.Minute

// Outcome is what a demo run produced.
type Outcome struct {
	Summary  engine.Summary
	Results  string   // path of results.json
	Journal  string   // path of the journal
	Bench    string   // path of the generated bench file
	Reports  []string // report files written
	Scenario *benchsim.Scenario
	Truth    benchsim.Truth // the simulator's answer key at the end
	Operator []string       // what the simulated operator did
	Elapsed  time.Duration  // simulated time of the session
	Wall     time.Duration  // real time it took
	// Engineer is the engineer's time in simulated time: from the first
	// prompt (the "Ready" prompt) to the end of the session, the
	// operator's time to listen, set up, read off and press included.
	Engineer time.Duration
	// Exposures is how many times the operator stepped on the beam pedal.
	Exposures int
	// Waits are the operator's waits before each answer; Waited their sum.
	Waits     []Wait
	Waited    time.Duration
	WaitedFor map[string]time.Duration // Waited by kind of action (keys of Delays)
	Hurried   bool                     // the operator was hurried (Options.Hurried)
	// Host is how long the process waited for a CPU while the session
	// ran: a busy machine disturbs the simulated meters' timing (HostLag).
	Host HostLag
}

// Run runs the whole sequence against the simulator: it starts the bench
// simulator on pseudo-terminals, writes a bench file naming its ports, opens
// the meters through the real drivers, and runs the engine with a
// simulated operator, then renders the report from the journal.
func Run(ctx context.Context, o Options) (*Outcome, error) {
	wallStart := time.Now()
	if o.Out == "" {
		return nil, errors.New("demo: no output directory")
	}
	if err := os.MkdirAll(o.Out, 0o755); err != nil {
		return nil, fmt.Errorf("demo: %w", err)
	}
	scn, err := loadScenario(o.Scenario)
	if err != nil {
		return nil, err
	}
	if o.HasSeed {
		scn.Seed = o.Seed
	}
	speed := o.Speed
	if speed <= 0 {
		speed = scn.Speed
	}
	if speed <= 0 {
		speed = 20
	}
	clk := clock.NewScaled(speed, time.Now())

	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	sim, err := benchsim.New(scn, clk)
	if err != nil {
		return nil, fmt.Errorf("demo: %w", err)
	}
	defer sim.Close()
	simDir, err := simFolder()
	if err != nil {
		return nil, fmt.Errorf("demo: %w", err)
	}
	defer os.RemoveAll(simDir)
	ports, err := sim.Serve(ctx, simDir)
	if err != nil {
		return nil, fmt.Errorf("demo: starting the simulator: %w", err)
	}

	benchPath, b, proc, err := benchFor(o.Out, scn, clk.Now(), o.Procedure, o.Language)
	if err != nil {
		return nil, err
	}

	jpath := filepath.Join(o.Out, "journal.db")
	jr, err := journal.Open(jpath, journal.Options{KeyDir: filepath.Join(o.Out, "board-key"), SoftwareVersion: o.Version, Clock: clk})
	if err != nil {
		return nil, err
	}
	defer jr.Close()

	op := NewOperator(ctx, sim, clk, uint64(scn.Seed))
	op.Hurried = o.Hurried
	// The operator reads the room's thermometer and barometer.
	op.Readings["temperature"], op.Readings["pressure"] = 20, 101.325
	if a := scn.Air; a != nil {
		op.Readings["temperature"], op.Readings["pressure"] = a.TemperatureC, a.PressureKPa
	}
	t := newDialogue(o.Dialogue, clk, b.Messages())
	pan := scripted.New(clk,
		scripted.WithResponder(func(p panel.Prompt) panel.Response {
			t.ask(p)
			return op.Respond(p)
		}),
		scripted.OnSay(func(m panel.Message) {
			t.say(m)
			op.Heard(m)
		}),
	)
	defer pan.Close()

	meters, err := bench.OpenMeters(ctx, b, clk, map[string]string{
		"dosimeter":  ports.Dosimeter.Link,
		"photometer": ports.Photometer.Link,
	})
	if err != nil {
		return nil, fmt.Errorf("demo: opening the simulated meters: %w", err)
	}
	defer func() {
		for _, m := range meters {
			m.Close()
		}
	}()
	var ej engine.Journal = simJournal{jr, scn, clk, o.OnRecord}
	var ep panel.Panel = pan
	if o.Wrap != nil {
		if ej, ep, err = o.Wrap(ej, ep, clk, proc); err != nil {
			return nil, fmt.Errorf("demo: %w", err)
		}
	}
	if o.RoomAir {
		simulateRoomAir(b, op.Readings["temperature"], op.Readings["pressure"])
	}
	cfg, err := b.Config(proc, meters, ep, ej, clk, o.Version)
	if err != nil {
		return nil, err
	}
	if !o.Fresh {
		// A demo killed on this --out folder resumes, as the board does.
		id, err := jr.Resumable(ctx, cfg.Session)
		if err != nil {
			return nil, fmt.Errorf("demo: %w", err)
		}
		cfg.Resume = id
	}
	first := clk.Mono() // the engineer's time starts at the first prompt
	ready := b.Greeting(meters, clk.Now(), proc.Title, cfg.Resume != "")
	if _, err := ep.Ask(ctx, panel.Prompt{Message: panel.Message{Text: ready, Level: panel.Info, Action: panel.ActAcknowledge}}); err != nil {
		return nil, err
	}
	if o.Hook != nil {
		o.Hook(sim, clk)
	}
	eng, err := engine.New(cfg)
	if err != nil {
		return nil, err
	}
	start := clk.Mono()
	watch := watchHost(speed)
	sum, runErr := eng.Run(ctx)
	host := watch.Stop()
	op.Wait()
	out := &Outcome{Summary: sum, Journal: jpath, Bench: benchPath, Scenario: scn, Truth: sim.Truth(),
		Operator: op.Actions(), Elapsed: clk.Mono() - start, Engineer: clk.Mono() - first,
		Exposures: op.Exposures(), Waits: op.Waits(), Waited: op.Waited(), WaitedFor: op.WaitedFor(), Hurried: o.Hurried, Host: host}
	if sum.Session != "" {
		out.Results, err = engine.WriteResultsFile(o.Out, engine.NewResultsFile(sum, cfg.Session))
		if err != nil {
			return out, errors.Join(runErr, err)
		}
		if o.Render != nil {
			out.Reports, err = o.Render(ctx, jpath, sum.Session, o.Out)
			if err != nil {
				return out, errors.Join(runErr, fmt.Errorf("demo: report: %w", err))
			}
		}
	}
	out.Wall = time.Since(wallStart)
	return out, runErr
}

// simJournal marks every session it begins as a simulator session, so the
// report says its figures are not measurements.
type simJournal struct {
	*journal.Journal
	scn *benchsim.Scenario
	clk clock.Clock
	on  func(kind entry.Kind, seq int64)
}

// Append appends through the journal, then tells Options.OnRecord.
func (j simJournal) Append(ctx context.Context, session string, kind entry.Kind, payload any) (int64, error) {
	seq, err := j.Journal.Append(ctx, session, kind, payload)
	if err == nil && j.on != nil {
		j.on(kind, seq)
	}
	return seq, err
}

// AppendAll appends through the journal in one write, then tells
// Options.OnRecord of each record.
func (j simJournal) AppendAll(ctx context.Context, session string, items []entry.Item) (int64, error) {
	last, err := j.Journal.AppendAll(ctx, session, items)
	if err == nil && j.on != nil {
		for i, it := range items {
			j.on(it.Kind, last-int64(len(items)-1-i))
		}
	}
	return last, err
}

func (j simJournal) Begin(ctx context.Context, s entry.Session) (string, error) {
	id, err := j.Journal.Begin(ctx, s)
	if err != nil {
		return id, err
	}
	_, err = j.Journal.Append(ctx, id, entry.KindEvent, entry.Event{
		Name:   "simulated_bench",
		Detail: fmt.Sprintf("readings come from the bench simulator (scenario %s, seed %d): not measurements", j.scn.Source, j.scn.Seed),
	})
	return id, err
}

func loadScenario(path string) (*benchsim.Scenario, error) {
	if path != "" {
		return benchsim.LoadScenario(path)
	}
	data, err := assets.ReadFile("assets/scenarios/" + DefaultScenario)
	if err != nil {
		return nil, fmt.Errorf("demo: %w", err)
	}
	return benchsim.ParseScenario("(built-in) "+DefaultScenario, data)
}

// dialogue prints what the board says, with the session's clock.
type dialogue struct {
	mu    sync.Mutex
	w     io.Writer
	clk   clock.Clock
	start time.Duration
	began bool
	tags  map[string]string // each kind's tag in the board's language
	width int               // of the widest tag, for the column
}

// dialogueKinds are the kinds of line the dialogue prints, as tagged in
// English.
var dialogueKinds = []string{"ask", "check", "say", "WARN", "ALARM", "retry"}

// newDialogue prints to w (nil: nothing) with each line's tag in the
// language m translates into (nil: English), as the terminal panel does.
func newDialogue(w io.Writer, clk clock.Clock, m engine.Messages) *dialogue {
	t := &dialogue{w: w, clk: clk, tags: map[string]string{}, width: 5}
	for _, k := range dialogueKinds {
		tag := k
		if m != nil {
			tag = m.Text(k)
		}
		t.tags[k] = tag
		t.width = max(t.width, utf8.RuneCountInString(tag))
	}
	return t
}

func (t *dialogue) line(kind, text string) {
	if t.w == nil {
		return
	}
	t.mu.Lock()
	defer t.mu.Unlock()
	if !t.began {
		t.start, t.began = t.clk.Mono(), true
	}
	tag := kind
	if tr, ok := t.tags[kind]; ok {
		tag = tr
	}
	tag += strings.Repeat(" ", max(0, t.width-utf8.RuneCountInString(tag)))
	fmt.Fprintf(t.w, "%s %s %s\n", clockText(t.clk.Mono()-t.start), tag, text)
}

// clockText is the dialogue's clock, minutes and seconds to a tenth:
// rounded once, so 7 min 59.96 s reads 08:00.0, never 07:60.0.
func clockText(d time.Duration) string {
	d = d.Round(100 * time.Millisecond)
	m := d / time.Minute
	return fmt.Sprintf("%02d:%04.1f", int(m), (d - m*time.Minute).Seconds())
}

// simFolder makes the folder for the simulator's pty links, named with
// this process's id, and first removes those left by demos that were
// killed (their process is gone), which no deferred clean-up reached.
func simFolder() (string, error) {
	const prefix = "kermalux-demo-sim-"
	old, _ := filepath.Glob(filepath.Join(os.TempDir(), prefix+"*-*"))
	for _, d := range old {
		var pid int
		if _, err := fmt.Sscanf(strings.TrimPrefix(filepath.Base(d), prefix), "%d-", &pid); err != nil || pid <= 0 || pid == os.Getpid() {
			continue
		}
		if !processAlive(pid) {
			os.RemoveAll(d)
		}
	}
	return os.MkdirTemp("", fmt.Sprintf("%s%d-", prefix, os.Getpid()))
}

// processAlive reports whether a process pid exists (signal 0 probes it).
func processAlive(pid int) bool {
	p, err := os.FindProcess(pid)
	if err != nil {
		return false
	}
	err = p.Signal(syscall.Signal(0))
	return err == nil || errors.Is(err, syscall.EPERM)
}

func (t *dialogue) ask(p panel.Prompt) {
	kind := "ask"
	if p.Action == panel.ActCheck {
		kind = "check"
	}
	text := p.Spoken()
	if p.Tasks > 0 && p.Task > 0 {
		text = fmt.Sprintf("[%d/%d] %s", p.Task, p.Tasks, text)
	}
	t.line(kind, text)
}

func (t *dialogue) say(m panel.Message) {
	kind := "say"
	switch m.Level {
	case panel.Warn:
		kind = "WARN"
	case panel.Alarm:
		kind = "ALARM"
	case panel.Retry:
		kind = "retry"
	}
	t.line(kind, m.Text)
}

// writeBench writes a bench file for the simulated bench into dir, with
// the demo's profiles, certificates and baseline beside it. The meters'
// ports are the simulator's links, given when the meters are opened.
func writeBench(dir string, scn *benchsim.Scenario, day time.Time) (string, error) {
	if err := copyAssets(dir); err != nil {
		return "", err
	}
	certs, err := calib.LoadDir(filepath.Join(dir, "demo-files", "certificates"))
	if err != nil {
		return "", fmt.Errorf("demo: %w", err)
	}
	certFor := func(serial string) string {
		if c := calib.Pick(certs, serial, day); c != nil {
			return "demo-files/certificates/" + filepath.Base(c.File)
		}
		return ""
	}
	var sb strings.Builder
	q := func(s string) string { return fmt.Sprintf("%q", s) }
	fmt.Fprintf(&sb, "# Bench file written by `kermalux demo` for the simulated bench of scenario\n# %s. Everything here is invented.\n", scn.Source)
	fmt.Fprintf(&sb, "site: %s\nroom: %s\nengineer: Demo engineer\n", q(orDefault(scn.Site, "Demo site")), q(orDefault(scn.Room, "Demo room")))
	in := scn.Intensifier
	fmt.Fprintf(&sb, "intensifier:\n  model: %s\n  serial: %s\n  field_modes:\n", q(strings.TrimSpace(in.Maker+" "+in.Model)), q(in.Serial))
	largest := 0.0
	for _, m := range in.FieldModes {
		largest = max(largest, m.DiameterCM)
	}
	for _, m := range in.FieldModes {
		fmt.Fprintf(&sb, "    - {name: %s, diameter_mm: %g}\n", q(m.Name), m.DiameterCM*10)
	}
	// An invented data sheet: conversion factor at least 100 in the largest
	// field, falling with the square of the field diameter (common practice
	// for magnified modes), contrast at least 15:1, non-uniformity at most 25 %.
	sb.WriteString("  spec:\n")
	for _, m := range in.FieldModes {
		r := m.DiameterCM / largest
		fmt.Fprintf(&sb, "    %s: %.0f\n", q("conversion_factor_min@"+m.Name), 100*r*r)
	}
	sb.WriteString("    conversion_factor_min: 20\n    contrast_ratio_min: 15\n    non_uniformity_max: 0.25\n")
	if _, err := os.Stat(filepath.Join(dir, "demo-files", "baselines", in.Serial+".json")); err == nil {
		fmt.Fprintf(&sb, "  baseline: %s\n", q("demo-files/baselines/"+in.Serial+".json"))
	}
	// The X-ray system around the intensifier and the reason for the
	// test, as a bench file states them for the report (invented).
	sb.WriteString("test_type: yearly\nxray_system:\n  model: \"Pellucor Imaging FL-700 (demo)\"\n  serial: \"FL7-0042\"\n" +
		"  generator: \"Pellucor Imaging HF-80 (demo)\"\n  generator_serial: \"HF80-1311\"\n  tube: \"Pellucor Imaging RT-12 (demo)\"\n  tube_serial: \"RT12-7730\"\n")
	sb.WriteString("meters:\n")
	switch scn.Dosimeter.Protocol {
	case benchsim.ProtocolOndrakel:
		sb.WriteString("  - name: dosimeter\n    role: dosimeter\n    scpi: {baud: 19200, init: [\"*RST\", \"*CLS\", \"CONF:KRAT\"], query: \"READ?\", quantity: air_kerma_rate}\n")
	default:
		sb.WriteString("  - name: dosimeter\n    role: dosimeter\n    profile: demo-files/profiles/veltrane-kr40.yaml\n")
	}
	if c := certFor(scn.Dosimeter.Serial); c != "" {
		fmt.Fprintf(&sb, "    certificate: %s\n", q(c))
	}
	sb.WriteString("  - name: photometer\n    role: photometer\n    profile: demo-files/profiles/vessoric-lm9.yaml\n")
	if c := certFor(scn.Photometer.Serial); c != "" {
		fmt.Fprintf(&sb, "    certificate: %s\n", q(c))
	}
	sb.WriteString("chamber:\n  grid_removed: true\n")
	if ch := scn.Dosimeter.Chamber; ch != nil {
		fmt.Fprintf(&sb, "  source_to_chamber_mm: %g\n  source_to_input_mm: %g\n  against_face: %t\n", ch.ChamberFromFocusMM, ch.InputFromFocusMM, ch.AgainstFace)
		if ch.AgainstFace && ch.BackscatterFactor > 0 {
			fmt.Fprintf(&sb, "  backscatter: %g\n", ch.BackscatterFactor)
		}
	}
	sb.WriteString("panel:\n  kind: terminal\n  speech: false\njournal: journal.db\nkeys: board-key\nsequence: acceptance\n")
	sb.WriteString("defaults:\n  temperature_c: 20\n  pressure_kpa: 101.325\n  tube_voltage_kv: 70\n")
	// The bench's lead disk for the contrast ratio: a tenth of the largest
	// field's diameter (IEC 61262-6 as recalled, unverified: see
	// procedures/builtin/contrast-ratio.yaml).
	fmt.Fprintf(&sb, "  lead_disk_diameter_mm: %g\n", math.Round(largest))
	// Invented local action levels: act when the conversion factor falls
	// below 60 % of the data sheet's minimum, or the input kerma rate
	// exceeds 2 µGy/s in any mode.
	sb.WriteString("limits:\n  baseline_fraction: 0.8\n  kerma_ceiling_ugy_s: 50\n  action:\n    input_kerma_rate_max: 2\n")
	for _, m := range in.FieldModes {
		r := m.DiameterCM / largest
		fmt.Fprintf(&sb, "    %s: %.0f\n", q("conversion_factor_min@"+m.Name), 60*r*r)
	}
	path := filepath.Join(dir, "bench.yaml")
	if err := os.WriteFile(path, []byte(sb.String()), 0o644); err != nil {
		return "", fmt.Errorf("demo: %w", err)
	}
	return path, nil
}

func orDefault(s, d string) string {
	if s == "" {
		return d
	}
	return s
}

// copyAssets writes the embedded demo files into dir/demo-files.
func copyAssets(dir string) error {
	var names []string
	err := fs.WalkDir(assets, "assets", func(p string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		names = append(names, p)
		return nil
	})
	if err != nil {
		return fmt.Errorf("demo: %w", err)
	}
	sort.Strings(names)
	for _, p := range names {
		data, err := assets.ReadFile(p)
		if err != nil {
			return fmt.Errorf("demo: %w", err)
		}
		dst := filepath.Join(dir, "demo-files", strings.TrimPrefix(p, "assets/"))
		if err := os.MkdirAll(filepath.Dir(dst), 0o755); err != nil {
			return fmt.Errorf("demo: %w", err)
		}
		if err := os.WriteFile(dst, data, 0o644); err != nil {
			return fmt.Errorf("demo: %w", err)
		}
	}
	return nil
}
