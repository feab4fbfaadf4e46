package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"os/signal"
	"strings"
	"syscall"
	"time"
	"unicode/utf8"

	"github.com/spf13/cobra"

	"kermalux/calib"
	"kermalux/drivers/clock"
	"kermalux/firmware-host/demo"
	"kermalux/firmware-host/live"
	"kermalux/procedures/catalog"
	"kermalux/procedures/engine"
	"kermalux/procedures/entry"
	"kermalux/procedures/panel"
)

type demoOptions struct {
	out       string
	scenario  string
	seed      int64
	speed     float64
	procedure string
	formats   string
	quiet     bool
	fresh     bool
	asJSON    bool
	live      string
	roomAir   bool
	language  string
	hurried   bool
}

// demoJSON is `demo --json`: the results file (simulated: true) and
// where everything was written.
type demoJSON struct {
	engine.ResultsFile
	ResultsPath string   `json:"results_path"`
	Journal     string   `json:"journal"`
	Bench       string   `json:"bench"`
	Reports     []string `json:"reports"`
	SimulatedS  float64  `json:"simulated_s"` // session time on the simulated clock
	WallS       float64  `json:"wall_s"`
	// The visit: the engineer's time from the first prompt to the end on
	// the simulated clock (the simulated operator's delays included),
	// against the target, and the exposures (beam pedal presses).
	EngineerS       float64 `json:"engineer_s"`
	EngineerTargetS float64 `json:"engineer_target_s"`
	OperatorWaitS   float64 `json:"operator_wait_s"` // the operator's part of engineer_s
	// OperatorWaitFor is operator_wait_s by kind of action (listen, press,
	// grid=removed...: the keys of the delay table in firmware-host/demo).
	OperatorWaitFor map[string]float64 `json:"operator_wait_for_s"`
	Exposures       int                `json:"exposures"`
	Hurried         bool               `json:"hurried"` // the operator took no time to listen, set up or read off
	// How long the process waited for a CPU (demo.HostLag; absent where
	// the system does not tell): its threads' time on a CPU and waiting
	// for one, the pressure (simulated seconds waited per real second),
	// and whether that was enough to disturb the simulated meters.
	HostCPUS     *float64 `json:"host_cpu_s,omitempty"`
	HostWaitS    *float64 `json:"host_cpu_wait_s,omitempty"`
	HostPressure *float64 `json:"host_pressure,omitempty"`
	HostBusy     bool     `json:"host_busy"`
}

func init() {
	var o demoOptions
	cmd := &cobra.Command{
		Use:   "demo [--out DIR] [--scenario FILE] [--seed N]",
		Short: "Run the whole acceptance sequence hands-free on the built-in bench simulator",
		Long: `Runs the full acceptance sequence against the bench simulator over
pseudo-terminals, through the real meter drivers, with a simulated operator who
presses the switch and works the beam pedal when told. Writes results.json, the
journal, the bench file it used and the report (HTML, PDF, CSV) into --out, and
prints what the board says as it goes and a short summary.

With --live ADDR the demo serves the board's read-only live view on ADDR, as
'kermalux run --live' does (pair with the code it prints and says, or the token
link printed once), and keeps it up after the session until interrupted.

The simulator's figures are invented: they are not measurements.`,
		Args: cobra.NoArgs,
		RunE: func(c *cobra.Command, args []string) error {
			return runDemo(c.Context(), c.OutOrStdout(), c.ErrOrStderr(), o, c.Flags().Changed("seed"))
		},
	}
	f := cmd.Flags()
	f.StringVar(&o.out, "out", "demo-out", "directory for results.json, journal, bench file and report")
	f.StringVar(&o.scenario, "scenario", "", "simulator scenario file (default: the built-in Tollemby Rise room 2 bench)")
	f.Int64Var(&o.seed, "seed", 0, "random seed (default: the scenario's)")
	f.Float64Var(&o.speed, "speed", 0, "simulated time runs this many times faster than real time (default: the scenario's)")
	f.StringVar(&o.procedure, "procedure", "", "procedure to run (default: acceptance)")
	f.StringVar(&o.formats, "format", "html,pdf,csv", "report formats")
	f.BoolVarP(&o.quiet, "quiet", "q", false, "print only the summary")
	f.BoolVar(&o.fresh, "new", false, "start a new session even if the journal in --out holds an unfinished one (default: resume it)")
	f.BoolVar(&o.asJSON, "json", false, "print only the summary, as JSON (the results file and the paths written)")
	f.BoolVar(&o.hurried, "hurried", false, "the simulated operator answers after a reaction time only, taking no time to listen, set up or read off (default: a person's times, see firmware-host/demo/operator.go)")
	f.StringVar(&o.live, "live", "", "serve the read-only live view on ADDR (HOST:PORT or :PORT) and keep it up after the session until interrupted; --speed 1 to watch in real time")
	f.StringVar(&o.language, "language", "", "the language the board speaks: "+strings.Join(catalog.Languages(), ", ")+" (default English)")
	f.BoolVar(&o.roomAir, "room-air", false, "simulate the bench's room-air sensor at the scenario's air: temperature and pressure are read, not entered")
	register(cmd)
}

func runDemo(parent context.Context, w, errw io.Writer, o demoOptions, hasSeed bool) error {
	if parent == nil {
		parent = context.Background()
	}
	ctx, stop := signal.NotifyContext(parent, os.Interrupt, syscall.SIGTERM)
	defer stop()
	render, err := reportRenderer(o.formats)
	if err != nil {
		return withCode(exitUsage, err)
	}
	opts := demo.Options{Out: o.out, Scenario: o.scenario, Seed: o.seed, HasSeed: hasSeed, Speed: o.speed,
		Procedure: o.procedure, Render: render, Version: version, Fresh: o.fresh, RoomAir: o.roomAir, Hurried: o.hurried, Language: o.language}
	if !o.quiet && !o.asJSON {
		opts.Dialogue = w
	}
	var view *live.View
	if o.live != "" {
		// The demo refuses an unknown language itself; the live view
		// then shows English.
		msgs, _ := catalog.Builtin(o.language)
		if view, err = live.Listen(o.live, live.Options{Messages: msgs}); errors.Is(err, live.ErrBadAddress) {
			return withCode(exitUsage, fmt.Errorf("--live: %w", err))
		} else if err != nil {
			return withCode(exitFailure, fmt.Errorf("--live: %w", err))
		}
		defer view.Close()
		lctx, cancel := context.WithCancel(ctx)
		defer func() { cancel(); _ = view.Wait() }()
		opts.Wrap = func(j engine.Journal, p panel.Panel, clk clock.Clock, proc engine.Procedure) (engine.Journal, panel.Panel, error) {
			j, p, err := view.Wrap(j, p, clk)
			if err != nil {
				return nil, nil, err
			}
			view.SetProcedure(proc)
			if err := view.Start(lctx); err != nil {
				return nil, nil, err
			}
			fmt.Fprint(errw, view.Printed())
			return j, p, p.Say(ctx, view.Announcement())
		}
	}
	out, runErr := demo.Run(ctx, opts)
	switch {
	case out != nil && o.asJSON:
		if err := printDemoJSON(w, out); err != nil {
			return withCode(exitFailure, errors.Join(runErr, err))
		}
	case out != nil:
		msgs, _ := catalog.Builtin(o.language) // refused above when unknown
		printDemoSummary(w, out, msgs)
	}
	if runErr != nil {
		return withCode(exitFailure, runErr)
	}
	if view != nil && ctx.Err() == nil {
		msgs, _ := catalog.Builtin(o.language)
		fmt.Fprintln(errw, tr(msgs, "live view: the session is over; the page stays up on %s until interrupted (Ctrl-C)", view.Addr()))
		<-ctx.Done()
	}
	return nil
}

func printDemoJSON(w io.Writer, out *demo.Outcome) error {
	doc := demoJSON{ResultsPath: out.Results, Journal: out.Journal, Bench: out.Bench, Reports: out.Reports,
		SimulatedS: out.Elapsed.Seconds(), WallS: out.Wall.Seconds(),
		EngineerS: out.Engineer.Seconds(), EngineerTargetS: demo.EngineerTarget.Seconds(), OperatorWaitS: out.Waited.Seconds(),
		Exposures: out.Exposures, Hurried: out.Hurried, OperatorWaitFor: map[string]float64{},
		HostBusy: out.Host.Busy()}
	if h := out.Host; h.Known {
		c, w, p := h.CPU.Seconds(), h.Wait.Seconds(), h.Pressure()
		doc.HostCPUS, doc.HostWaitS, doc.HostPressure = &c, &w, &p
	}
	for k, d := range out.WaitedFor {
		doc.OperatorWaitFor[k] = d.Seconds()
	}
	if doc.Reports == nil {
		doc.Reports = []string{}
	}
	if out.Results != "" {
		rf, err := engine.ReadResults(out.Results)
		if err != nil {
			return err
		}
		doc.ResultsFile = rf
	}
	return writeJSON(w, doc)
}

// printDemoSummary prints the session's summary in the language m
// translates into (nil: English), as the board shows it; the quantities
// keep the names results.json gives them.
func printDemoSummary(w io.Writer, out *demo.Outcome, m *catalog.Catalog) {
	s := out.Summary
	fmt.Fprintln(w)
	fmt.Fprintln(w, tr(m, "Session %s (SIMULATED): %s, %d of %d steps, beam-on %.0f s, %s simulated in %s.",
		s.Session, m.Text(s.Outcome), s.Steps, s.Of, s.BeamOn.Seconds(), out.Elapsed.Round(1e9), m.Number(out.Wall.Round(1e8).String())))
	fmt.Fprintln(w, visitLine(out, m))
	if l := hostLine(out.Host, s.Results, m); l != "" {
		fmt.Fprintln(w, l)
	}
	writeSummaryTable(w, s.Results, m)
	if s.Review > 0 {
		fmt.Fprintln(w, tr(m, "%d result(s) need review.", s.Review))
	}
	if out.Results != "" {
		fmt.Fprintln(w, tr(m, "Results: %s", out.Results))
		fmt.Fprintln(w, tr(m, "Journal: %s", out.Journal))
		fmt.Fprintln(w, tr(m, "Bench:   %s", out.Bench))
	}
	for _, r := range out.Reports {
		fmt.Fprintln(w, tr(m, "Report:  %s", r))
	}
	if len(out.Reports) == 0 && out.Results != "" {
		fmt.Fprintln(w, tr(m, "Report:  not rendered by this build; at the office: kermalux report --journal %s --out DIR", out.Journal))
	}
	fmt.Fprintln(w, m.Text("Simulated bench: these figures are not measurements."))
}

// tr is format in the language m translates into (nil: English), filled
// with args.
func tr(m *catalog.Catalog, format string, args ...any) string {
	return fmt.Sprintf(m.Text(format), args...)
}

// visitLine is the visit's figures: the engineer's time against the
// target, with the operator's part of it, beside beam-on and exposures.
func visitLine(out *demo.Outcome, m *catalog.Catalog) string {
	verdict := "within"
	if out.Engineer > demo.EngineerTarget {
		verdict = "over"
	}
	who := "the simulated operator's delays"
	if out.Hurried {
		who = "a hurried operator's reaction times only (--hurried)"
	}
	return tr(m, "Visit: engineer time %s (%s the %s target; %s of it %s), beam-on %.0f s, %d exposures.",
		minSec(out.Engineer, m), m.Text(verdict), minSec(demo.EngineerTarget, m), minSec(out.Waited, m), m.Text(who), out.Summary.BeamOn.Seconds(), out.Exposures)
}

// hostLine warns when the machine was too busy for the demo's speed:
// the simulated meters then lag and bunch their readings, and a retake
// or a reading "not measurable" may be the host's, not the bench's.
// It is said only when a figure came out not measurable: a busy host that
// disturbed nothing needs no excuse.
func hostLine(l demo.HostLag, results []entry.Result, m *catalog.Catalog) string {
	missed := 0
	for _, r := range results {
		if r.Verdict == string(calib.NotMeasurable) {
			missed++
		}
	}
	if !l.Busy() || missed == 0 {
		return ""
	}
	slower := max(1, math.Floor(l.Speed/4))
	num := func(format string, v float64) string { return m.Number(fmt.Sprintf(format, v)) }
	return tr(m, "Busy host: at %s× real time this machine kept the demo waiting for a CPU %s s of simulated time a second (%s s in %s s). The %d figure(s) not measurable may come from this machine, not from the simulated bench: run again with --speed %s, or on a quieter machine.",
		num("%g", l.Speed), num("%.1f", l.Pressure()), num("%.0f", l.Wait.Seconds()), num("%.0f", l.Wall.Seconds()), missed, num("%g", slower))
}

// minSec writes d as "12 min 05 s".
func minSec(d time.Duration, m *catalog.Catalog) string {
	d = d.Round(time.Second)
	n := d / time.Minute
	return tr(m, "%d min %02d s", n, (d-n*time.Minute)/time.Second)
}

// writeSummaryTable prints the results of a run as a table with a header:
// the value rounded to its expanded uncertainty's two significant digits
// (JCGM 100:2008 7.2.6), U, the coverage factor k with two decimals, the
// unit and the verdict. Text columns are aligned left, numbers right.
//
// The heads, the words in the cells and the decimal separator are in the
// language m translates into (nil: English); the quantities keep their
// results.json names. A dark level or a stability, which has no field,
// shows its meter there.
func writeSummaryTable(w io.Writer, results []entry.Result, m *catalog.Catalog) {
	rows := [][]string{{m.Text("quantity"), m.Text("field"), m.Text("value"), "U", "k", m.Text("unit"), m.Text("verdict")}}
	for _, r := range results {
		mode := r.FieldMode
		if mode == "" && r.Meter != "" {
			// A dark level or a stability: the meter it is of.
			mode = m.Text(r.Meter)
		}
		if mode == "" {
			mode = "-"
		}
		val, unc := engine.RoundToUncertainty(r.Value, r.ExpUnc)
		k := engine.CoverageFactor(r.K)
		switch {
		case r.Verdict == string(calib.NotMeasurable):
			// No value to print: the verdict column and the report say why.
			val, unc, k = "-", m.Text("not measured"), "-"
		case unc == "":
			val, unc, k = m.Number(val), m.Text("not evaluated"), "-"
		default:
			val, unc, k = m.Number(val), "± "+m.Number(unc), m.Number(k)
		}
		verdict := m.Text(r.Verdict)
		if !r.Calibrated && r.Verdict != string(calib.NotMeasurable) {
			verdict = tr(m, "%s (not calibrated)", verdict)
		}
		unit := r.Unit
		if unit == "1" {
			unit = m.Text("ratio")
		}
		rows = append(rows, []string{r.Quantity, mode, val, unc, k, unit, verdict})
	}
	width := make([]int, len(rows[0]))
	for _, row := range rows {
		for i, c := range row {
			width[i] = max(width[i], utf8.RuneCountInString(c))
		}
	}
	right := []bool{false, false, true, true, true, false, false}
	for _, row := range rows {
		var b strings.Builder
		b.WriteString(" ")
		for i, c := range row {
			pad := strings.Repeat(" ", width[i]-utf8.RuneCountInString(c))
			b.WriteString(" ")
			if right[i] {
				b.WriteString(pad + c)
			} else {
				b.WriteString(c + pad)
			}
		}
		fmt.Fprintln(w, strings.TrimRight(b.String(), " "))
	}
}
