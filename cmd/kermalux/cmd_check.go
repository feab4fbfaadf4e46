package main

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"strings"

	"github.com/spf13/cobra"

	"kermalux/firmware-host/bench"
	"kermalux/procedures/builtin"
	"kermalux/procedures/catalog"
	"kermalux/procedures/script"
)

type checkOptions struct {
	bench    string
	builtin  bool
	modes    []string
	language string
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
budget the steps could exceed, include cycles, and a text said or shown
that has no translation into the bench's language (or --language).

Exit status: 0 valid, 1 invalid, 2 wrong command line.`,
		Args: cobra.MaximumNArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error { return runCheck(cmd, o, args) },
	}
	check.Flags().StringVar(&o.bench, "bench", "", "bench file: also check that its meters report what the script measures")
	check.Flags().BoolVar(&o.builtin, "builtin", false, "check every built-in procedure")
	check.Flags().StringVar(&o.language, "language", "", "check that every text has a translation into this language ("+strings.Join(catalog.Languages(), ", ")+"); default the bench's")
	check.Flags().StringSliceVar(&o.modes, "modes", nil, "field modes of the intensifier, comma-separated (for per_field_mode blocks that take their modes from the bench)")

	var showSteps string
	var showModes []string
	var procsJSON bool
	procs := &cobra.Command{
		Use:   "procedures [--steps NAME]",
		Short: "List the built-in procedures, or the steps of one",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			if showSteps != "" {
				return runShowSteps(cmd.OutOrStdout(), showSteps, showModes, procsJSON)
			}
			return runListProcedures(cmd.OutOrStdout(), procsJSON)
		},
	}
	procs.Flags().StringVar(&showSteps, "steps", "", "show the flattened steps of the built-in procedure NAME")
	procs.Flags().StringSliceVar(&showModes, "modes", []string{"full", "medium", "small"}, "field modes to expand per_field_mode blocks with")
	procs.Flags().BoolVar(&procsJSON, "json", false, "print the list, or the steps, as JSON")
	_ = procs.RegisterFlagCompletionFunc("steps", completeProcedures)
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
	if o.language != "" {
		m, err := catalog.Builtin(o.language)
		if err != nil {
			return withCode(exitUsage, fmt.Errorf("check: --language: %w", err))
		}
		env.Texts = nil
		if !m.IsEnglish() {
			env.Texts = m
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
	switch b := script.BeamUse(p, env); {
	case b.Readings == 0:
	case b.Most > p.BeamBudget:
		s += fmt.Sprintf(", held while running: %d readings, each sure of its min_beam (%g s in all with a release each), up to %g s if each used its max_beam",
			b.Readings, b.Reserve.Seconds(), b.Most.Seconds())
	default:
		s += fmt.Sprintf(": %d readings, at most %g s with a release each", b.Readings, b.Most.Seconds())
	}
	if len(env.FieldModes) > 0 {
		if f, err := script.Flatten(p, env); err == nil {
			s += fmt.Sprintf(", %d steps", len(f.Steps))
		}
	}
	return s
}

// procedureJSON is one built-in procedure in `procedures --json`.
type procedureJSON struct {
	Name       string  `json:"name"`
	Title      string  `json:"title"`
	Version    string  `json:"version"`
	BeamBudget float64 `json:"beam_budget_s"`
}

// stepsJSON is `procedures --steps NAME --json`.
type stepsJSON struct {
	procedureJSON
	FieldModes []string   `json:"field_modes"`
	BeamMax    float64    `json:"beam_max_s"` // the flattened steps' beam-on budget
	Steps      []stepJSON `json:"steps"`
}

type stepJSON struct {
	Index     int               `json:"index"`
	Of        int               `json:"of"`
	ID        string            `json:"id"`
	Kind      string            `json:"kind"`
	FieldMode string            `json:"field_mode,omitempty"`
	Procedure string            `json:"procedure"`
	Text      string            `json:"text,omitempty"`
	Items     []string          `json:"items,omitempty"`
	Setup     map[string]string `json:"setup,omitempty"`
	MaxBeam   float64           `json:"max_beam_s,omitempty"`
}

func writeJSON(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	if err := enc.Encode(v); err != nil {
		return withCode(exitFailure, fmt.Errorf("JSON: %w", err))
	}
	return nil
}

func runListProcedures(w io.Writer, asJSON bool) error {
	list := []procedureJSON{}
	for _, n := range builtin.Names() {
		p, err := script.LoadBuiltin(n)
		if err != nil {
			return withCode(exitFailure, fmt.Errorf("built-in %s: %w", n, err))
		}
		list = append(list, procedureJSON{Name: n, Title: p.Title, Version: p.Version, BeamBudget: p.BeamBudget.Seconds()})
	}
	if asJSON {
		return writeJSON(w, list)
	}
	for _, p := range list {
		fmt.Fprintf(w, "%-22s %s\n", p.Name, p.Title)
	}
	return nil
}

func runShowSteps(w io.Writer, name string, modes []string, asJSON bool) error {
	p, err := script.LoadBuiltin(name)
	if err != nil {
		return withCode(exitFailure, err)
	}
	f, err := script.Flatten(p, script.Env{FieldModes: modes})
	if err != nil {
		return withCode(exitFailure, err)
	}
	if asJSON {
		out := stepsJSON{procedureJSON: procedureJSON{Name: name, Title: p.Title, Version: p.Version, BeamBudget: p.BeamBudget.Seconds()},
			FieldModes: modes, BeamMax: f.BeamBudget.Seconds(), Steps: []stepJSON{}}
		for _, s := range f.Steps {
			sj := stepJSON{Index: s.Index, Of: s.Of, ID: s.ID, Kind: string(s.Step.Kind), FieldMode: s.FieldMode, Procedure: s.Procedure,
				Text: strings.Join(strings.Fields(s.Step.Text), " "), MaxBeam: s.MaxBeam().Seconds(), Setup: s.Step.Setup.Map()}
			for _, it := range s.Step.Items {
				sj.Items = append(sj.Items, it.Text)
			}
			out.Steps = append(out.Steps, sj)
		}
		return writeJSON(w, out)
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
