package main

import (
	"errors"
	"fmt"
	"io"
	"strings"

	"github.com/spf13/cobra"

	"kermalux/firmware-host/bench"
	"kermalux/procedures/builtin"
	"kermalux/procedures/script"
)

type checkOptions struct {
	bench   string
	builtin bool
	modes   []string
}

func init() {
	var o checkOptions
	check := &cobra.Command{
		Use:   "check FILE | check --builtin",
		Short: "Check a procedure script: form, units, references and safety rules",
		Long: `check reads a procedure script (see procedures/script/FORMAT.md) and reports
every problem it finds, one per line as file:line:col: reason, on standard
error: unknown step kinds or fields, unit mistakes, references to steps that do
not exist, a beam step before the pre-exposure safety checklist, a beam-on
budget the steps could exceed, include cycles.

Exit status: 0 valid, 1 invalid, 2 wrong command line.`,
		Args: cobra.MaximumNArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error { return runCheck(cmd, o, args) },
	}
	check.Flags().StringVar(&o.bench, "bench", "", "bench file: also check that its meters report what the script measures")
	check.Flags().BoolVar(&o.builtin, "builtin", false, "check every built-in procedure")
	check.Flags().StringSliceVar(&o.modes, "modes", nil, "field modes of the intensifier, comma-separated (for per_field_mode blocks that take their modes from the bench)")

	var showSteps string
	var showModes []string
	procs := &cobra.Command{
		Use:   "procedures [--steps NAME]",
		Short: "List the built-in procedures, or the steps of one",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			if showSteps != "" {
				return runShowSteps(cmd.OutOrStdout(), showSteps, showModes)
			}
			return runListProcedures(cmd.OutOrStdout())
		},
	}
	procs.Flags().StringVar(&showSteps, "steps", "", "show the flattened steps of the built-in procedure NAME")
	procs.Flags().StringSliceVar(&showModes, "modes", []string{"full", "medium", "small"}, "field modes to expand per_field_mode blocks with")
	register(check, procs)
}

func runCheck(cmd *cobra.Command, o checkOptions, args []string) error {
	switch {
	case o.builtin && len(args) > 0:
		return withCode(exitUsage, errors.New("check: give a FILE or --builtin, not both"))
	case !o.builtin && len(args) == 0:
		return withCode(exitUsage, errors.New("check: give a procedure FILE, or --builtin"))
	}
	env := script.Env{FieldModes: o.modes}
	if o.bench != "" {
		// The bench says which quantities its meters report and which
		// field modes the intensifier has.
		b, err := bench.Load(o.bench)
		if err != nil {
			return withCode(exitFailure, err)
		}
		env = b.Env()
		if len(o.modes) > 0 {
			env.FieldModes = o.modes
		}
	}
	out, errOut := cmd.OutOrStdout(), cmd.ErrOrStderr()
	var bad int
	report := func(label string, p *script.Procedure, ps script.Problems) {
		for _, q := range ps {
			fmt.Fprintln(errOut, q)
		}
		if len(ps) > 0 {
			bad++
			return
		}
		fmt.Fprintf(out, "%s: ok: %s\n", label, summary(p, env))
	}
	if o.builtin {
		for _, n := range builtin.Names() {
			p, ps := script.CheckBuiltin(n, env)
			report(n, p, ps)
		}
	} else {
		p, ps := script.CheckFile(args[0], env)
		report(args[0], p, ps)
	}
	if bad > 0 {
		return withCode(exitFailure, fmt.Errorf("check: %d procedure(s) invalid", bad))
	}
	return nil
}

// summary describes a valid procedure in one line.
func summary(p *script.Procedure, env script.Env) string {
	s := fmt.Sprintf("%q version %s, beam-on budget %g s", p.Title, p.Version, p.BeamBudget.Seconds())
	if len(env.FieldModes) > 0 {
		if f, err := script.Flatten(p, env); err == nil {
			s += fmt.Sprintf(", %d steps", len(f.Steps))
		}
	}
	return s
}

func runListProcedures(w io.Writer) error {
	for _, n := range builtin.Names() {
		p, err := script.LoadBuiltin(n)
		if err != nil {
			return withCode(exitFailure, fmt.Errorf("built-in %s: %w", n, err))
		}
		fmt.Fprintf(w, "%-22s %s\n", n, p.Title)
	}
	return nil
}

func runShowSteps(w io.Writer, name string, modes []string) error {
	p, err := script.LoadBuiltin(name)
	if err != nil {
		return withCode(exitFailure, err)
	}
	f, err := script.Flatten(p, script.Env{FieldModes: modes})
	if err != nil {
		return withCode(exitFailure, err)
	}
	fmt.Fprintf(w, "%s: %d steps, beam-on budget %g s\n", p.Title, len(f.Steps), f.BeamBudget.Seconds())
	for _, s := range f.Steps {
		text := strings.Join(strings.Fields(s.Step.Text), " ")
		if r := []rune(text); len(r) > 60 {
			text = string(r[:57]) + "..."
		}
		fmt.Fprintf(w, "%3d/%d  %-34s %-16s %s\n", s.Index, s.Of, s.ID, s.Step.Kind, text)
	}
	return nil
}
