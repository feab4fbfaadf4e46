package main

import (
	"bufio"
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/signal"
	"strconv"
	"strings"
	"syscall"
	"time"

	"github.com/spf13/cobra"

	"kermalux/drivers/benchsim"
	"kermalux/drivers/clock"
)

type simOptions struct {
	scenario string
	seed     int64
	speed    float64
	dir      string
	noInput  bool
}

func init() {
	var o simOptions
	cmd := &cobra.Command{
		Use:   "sim --scenario FILE",
		Short: "Run the bench simulator: a fluoroscope and two meters on pseudo-terminals",
		Long: `sim serves a simulated test bench (an intensifier, an air-kerma-rate meter and a
luminance meter) on pseudo-terminals, as described by a scenario file, until
interrupted. It prints each meter's stable link (<dir>/by-id/<name>) and its
current /dev/pts device; point a bench file or 'kermalux read' at the link.

Type a letter and Enter to play the operator:
  b  beam on/off        m  next field mode     d  lead disk in/out
  f  phantom in/out     p R ANGLE  move the photometer (R: 0..1 of the radius)
  k KV  tube voltage    t  show the true values    q  quit

The simulator emits no radiation; the readings it serves are invented.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error { return runSim(cmd, o) },
	}
	cmd.Flags().StringVar(&o.scenario, "scenario", "", "scenario file (YAML, see drivers/benchsim/SCENARIO.md)")
	cmd.Flags().Int64Var(&o.seed, "seed", 0, "noise seed (overrides the scenario's)")
	cmd.Flags().Float64Var(&o.speed, "speed", 0, "clock speed, times real time (overrides the scenario's)")
	cmd.Flags().StringVar(&o.dir, "dir", "", "directory for the by-id links (default: a new temporary directory)")
	cmd.Flags().BoolVar(&o.noInput, "no-input", false, "do not read operator keys from the terminal")
	_ = cmd.MarkFlagRequired("scenario")
	register(cmd)
}

func runSim(cmd *cobra.Command, o simOptions) error {
	scn, err := benchsim.LoadScenario(o.scenario)
	if err != nil {
		return withCode(exitFailure, err)
	}
	if cmd.Flags().Changed("seed") {
		scn.Seed = o.seed
	}
	if cmd.Flags().Changed("speed") {
		if o.speed <= 0 || o.speed > 1000 {
			return withCode(exitUsage, fmt.Errorf("--speed must be in (0,1000], got %g", o.speed))
		}
		scn.Speed = o.speed
	}
	dir := o.dir
	if dir == "" {
		if dir, err = os.MkdirTemp("", "kx-sim-"); err != nil {
			return withCode(exitFailure, err)
		}
		defer os.RemoveAll(dir)
	}
	ctx, stop := signal.NotifyContext(cmd.Context(), os.Interrupt, syscall.SIGTERM)
	defer stop()

	clk := clock.NewScaled(scn.Speed, time.Now())
	bench, err := benchsim.New(scn, clk)
	if err != nil {
		return withCode(exitFailure, err)
	}
	defer bench.Close()
	ports, err := bench.Serve(ctx, dir)
	if err != nil {
		return withCode(exitFailure, err)
	}
	out := cmd.OutOrStdout()
	fmt.Fprintf(out, "Simulated bench %q (%s %s, serial %s), clock %g× real time\n",
		scn.Source, scn.Site, scn.Room, scn.Intensifier.Serial, scn.Speed)
	for _, p := range []benchsim.Port{ports.Dosimeter, ports.Photometer} {
		fmt.Fprintf(out, "  %-10s %-13s %s -> %s (%d baud)\n", p.Role, p.Protocol, p.Link, p.Device, p.Baud)
	}
	fmt.Fprintln(out, "Press Ctrl-C to stop. No radiation is emitted; all readings are invented.")
	if !o.noInput {
		go simKeys(ctx, stop, bench, cmd.InOrStdin(), out)
	}
	<-ctx.Done()
	fmt.Fprintln(out, "Simulator stopped.")
	return nil
}

// simKeys plays the operator from typed lines.
func simKeys(ctx context.Context, stop func(), b *benchsim.Bench, in io.Reader, out io.Writer) {
	modes := b.FieldModes()
	sc := bufio.NewScanner(in)
	for ctx.Err() == nil && sc.Scan() {
		f := strings.Fields(sc.Text())
		if len(f) == 0 {
			continue
		}
		tr := b.Truth()
		var err error
		switch f[0] {
		case "b":
			b.SetBeam(!tr.Beam)
			fmt.Fprintf(out, "beam %s\n", onOff(!tr.Beam))
		case "m":
			next := modes[0]
			for i, m := range modes {
				if m == tr.FieldMode {
					next = modes[(i+1)%len(modes)]
				}
			}
			err = b.SetFieldMode(next)
			fmt.Fprintf(out, "field mode %s\n", next)
		case "d":
			b.SetLeadDisk(!tr.LeadDisk)
			fmt.Fprintf(out, "lead disk %s\n", inOut(!tr.LeadDisk))
		case "f":
			b.SetPhantom(!tr.Phantom)
			fmt.Fprintf(out, "phantom %s\n", inOut(!tr.Phantom))
		case "p":
			var r, a float64
			if len(f) != 3 {
				err = errors.New("usage: p R ANGLE")
			} else if r, err = strconv.ParseFloat(f[1], 64); err == nil {
				if a, err = strconv.ParseFloat(f[2], 64); err == nil {
					err = b.SetPhotometerPosition(r, a)
				}
			}
		case "k":
			var kv float64
			if len(f) != 2 {
				err = errors.New("usage: k KV")
			} else if kv, err = strconv.ParseFloat(f[1], 64); err == nil {
				err = b.SetTubeVoltage(kv)
			}
		case "t":
			fmt.Fprintf(out, "t=%.1fs beam %s, mode %s, G %.1f cd·m⁻²/(µGy·s⁻¹), input %.3f µGy/s, photometer sees %.2f cd/m², contrast ratio %.1f, faults %d\n",
				tr.At.Seconds(), onOff(tr.Beam), tr.FieldMode, tr.ConversionFactor, tr.InputKermaRate,
				tr.PhotometerLuminance, tr.ContrastRatio, len(tr.ActiveFaults))
		case "q":
			stop()
			return
		default:
			err = fmt.Errorf("unknown key %q (b m d f p k t q)", f[0])
		}
		if err != nil {
			fmt.Fprintln(out, "error:", err)
		}
	}
}

func onOff(on bool) string {
	if on {
		return "on"
	}
	return "off"
}

func inOut(in bool) string {
	if in {
		return "in"
	}
	return "out"
}
