package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/signal"
	"strings"
	"syscall"

	"github.com/spf13/cobra"

	"kermalux/drivers"
	"kermalux/drivers/clock"
	"kermalux/firmware-host/bench"
	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/live"
	"kermalux/firmware-host/panel/compose"
	"kermalux/procedures/engine"
	"kermalux/procedures/panel"
	"kermalux/procedures/script"
)

type runOptions struct {
	bench   string
	panel   string
	out     string
	asJSON  bool // print the results file on stdout at the end
	journal string
	standby bool
	fresh   bool
	ports   []string
	live    string // --live ADDR: serve the read-only live view there

	// in and errw replace standard input (the terminal panel's) and
	// standard error; nil: the process's own (tests set them).
	in   io.Reader
	errw io.Writer
}

func init() {
	var o runOptions
	cmd := &cobra.Command{
		Use:   "run [PROCEDURE] --bench BENCHFILE",
		Short: "Run a procedure on the bench, hands-free",
		Long: `Run a procedure (a built-in name or a script file; default: the bench file's
sequence) on the meters and panel the bench file names. The procedure must pass
the checker. An unfinished session of the same procedure on the same intensifier
is resumed at its first unfinished step. results.json is written to --out.

With --standby (at boot) the board beeps twice, says which meters and
certificates it found, and waits for a press of the foot switch to start.

With --live ADDR (for example --live :8471) the board also serves a read-only
page of the session on ADDR: the step, the meters' readings, beam-on time,
results, retakes and acknowledgements. A browser pairs with the six-digit code
the board says and shows at start, or with the token link printed once on
standard error; any other client gets nothing. The page cannot start a step or
an exposure.

CAUTION: X-rays are dangerous. Follow local regulations and the advice of your
medical physicist or radiation safety officer.`,
		Args: cobra.MaximumNArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			name := ""
			if len(args) == 1 {
				name = args[0]
			}
			o.errw = cmd.ErrOrStderr()
			return runRun(cmd.Context(), o, name)
		},
	}
	f := cmd.Flags()
	f.StringVar(&o.bench, "bench", "", "bench file (required)")
	f.StringVar(&o.panel, "panel", "", "panel: terminal or gpio (default: the bench file's)")
	f.StringVar(&o.out, "out", ".", "directory for results.json (must exist: checked before the first step)")
	f.BoolVar(&o.asJSON, "json", false, "at the end, print the results (as in results.json) on stdout")
	f.StringVar(&o.journal, "journal", "", "journal file (default: the bench file's)")
	f.BoolVar(&o.standby, "standby", false, "wait at the ready for a foot-switch press before starting")
	f.BoolVar(&o.fresh, "new", false, "start a new session even if an unfinished one exists")
	f.StringArrayVar(&o.ports, "port", nil, "NAME=PATH: use PATH for the bench's meter NAME (repeatable; e.g. the simulator's links)")
	f.StringVar(&o.live, "live", "", "serve the read-only live view on ADDR (HOST:PORT or :PORT), paired by the code the board says or the token printed once")
	_ = cmd.MarkFlagRequired("bench")
	register(cmd)
}

func runRun(parent context.Context, o runOptions, name string) error {
	if parent == nil {
		parent = context.Background()
	}
	ctx, stop := signal.NotifyContext(parent, os.Interrupt, syscall.SIGTERM)
	defer stop()
	errw := o.errw
	if errw == nil {
		errw = os.Stderr
	}
	b, err := bench.Load(o.bench)
	if err != nil {
		return withCode(exitFailure, err)
	}
	// Before the first step: results.json must have somewhere to go.
	if err := engine.CheckResultsDir(o.out); err != nil {
		return withCode(exitUsage, fmt.Errorf("--out: %w", err))
	}
	proc, err := b.Procedure(name)
	if err != nil {
		var probs script.Problems
		if errors.As(err, &probs) {
			for _, p := range probs {
				fmt.Fprintln(errw, p.String())
			}
		}
		return withCode(exitFailure, err)
	}
	if o.panel != "" {
		if o.panel != compose.KindGPIO && o.panel != compose.KindTerminal {
			return withCode(exitUsage, fmt.Errorf("--panel %q: want terminal or gpio", o.panel))
		}
		b.Panel.Kind = o.panel
	}
	var view *live.View
	if o.live != "" {
		// Opened first: a busy or wrong address stops here, before the
		// journal, the panel or a meter is opened.
		if view, err = live.Listen(o.live, live.Options{Procedure: proc, Messages: b.Messages()}); errors.Is(err, live.ErrBadAddress) {
			return withCode(exitUsage, fmt.Errorf("--live: %w", err))
		} else if err != nil {
			return withCode(exitFailure, fmt.Errorf("--live: %w", err))
		}
		defer view.Close()
	}
	clk := clock.NewReal()
	jpath := o.journal
	if jpath == "" {
		jpath = b.Rel(b.Journal)
	}
	if jpath == "" {
		return withCode(exitUsage, fmt.Errorf("bench %s names no journal; give --journal", o.bench))
	}
	jr, err := journal.Open(jpath, journal.Options{KeyDir: b.KeyDir(), SoftwareVersion: version, Clock: clk})
	if err != nil {
		return withCode(exitFailure, err)
	}
	defer jr.Close()
	term := compose.Terminal{}
	if o.in != nil {
		term = compose.Terminal{In: o.in, Out: errw}
	}
	pan, err := compose.Open(b.Panel, clk, term, nil)
	if errors.Is(err, panel.ErrNoHardware) {
		return withCode(exitFailure, fmt.Errorf("%w (on a machine without GPIO, give --panel terminal)", err))
	}
	if err != nil {
		return withCode(exitFailure, err)
	}
	defer pan.Close()
	var ej engine.Journal = jr
	var ep panel.Panel = pan
	if view != nil {
		if ej, ep, err = view.Wrap(jr, pan, clk); err != nil {
			return withCode(exitFailure, err)
		}
		lctx, cancel := context.WithCancel(ctx)
		defer func() { cancel(); _ = view.Wait() }()
		if err := view.Start(lctx); err != nil {
			return withCode(exitFailure, err)
		}
		fmt.Fprint(errw, view.Printed())
		if err := ep.Say(ctx, view.Announcement()); err != nil {
			return withCode(exitFailure, err)
		}
	}
	ports := map[string]string{}
	for _, kv := range o.ports {
		k, v, ok := strings.Cut(kv, "=")
		if !ok || k == "" || v == "" {
			return withCode(exitUsage, fmt.Errorf("--port %q: want NAME=PATH", kv))
		}
		ports[k] = v
	}
	meters, err := bench.OpenMeters(ctx, b, clk, ports)
	if err != nil {
		_ = ep.Say(ctx, panel.Message{Text: fmt.Sprintf(b.Messages().Text("A meter was not found: %s"), err), Level: panel.Warn})
		_ = ep.Indicate(ctx, panel.Fault)
		return withCode(exitFailure, err)
	}
	defer closeMeters(meters)
	cfg, err := b.Config(proc, meters, ep, ej, clk, version)
	if err != nil {
		return withCode(exitFailure, err)
	}
	if !o.fresh {
		if id, err := jr.Resumable(ctx, cfg.Session); err != nil {
			return withCode(exitFailure, err)
		} else if id != "" {
			cfg.Resume = id
		}
	}
	if o.standby {
		text := b.Greeting(meters, clk.Now(), proc.Title, cfg.Resume != "")
		_ = ep.Indicate(ctx, panel.Ready)
		if _, err := ep.Ask(ctx, panel.Prompt{Message: panel.Message{Text: text, Level: panel.Info, Action: panel.ActAcknowledge}}); err != nil {
			return withCode(exitFailure, err)
		}
	}
	eng, err := engine.New(cfg)
	if err != nil {
		return withCode(exitFailure, err)
	}
	sum, runErr := eng.Run(ctx)
	if sum.Session != "" && sum.Outcome != "interrupted" {
		path, err := engine.WriteResultsFile(o.out, engine.NewResultsFile(sum, cfg.Session))
		if err != nil {
			return withCode(exitFailure, errors.Join(runErr, err))
		}
		m := b.Messages() // shown on the board: in its language
		fmt.Fprintln(errw, tr(m, "session %s: %s, %d results, %d to review, beam-on %.0f s; %s", sum.Session, m.Text(sum.Outcome), len(sum.Results), sum.Review, sum.BeamOn.Seconds(), path))
		if o.asJSON {
			if err := engine.WriteResults(os.Stdout, engine.NewResultsFile(sum, cfg.Session)); err != nil {
				return withCode(exitFailure, errors.Join(runErr, err))
			}
		}
	}
	if runErr != nil {
		return withCode(exitFailure, runErr)
	}
	return nil
}

func closeMeters(ms map[string]drivers.Meter) {
	for _, m := range ms {
		m.Close()
	}
}
