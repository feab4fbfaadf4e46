//go:build !board

package main

import (
	"errors"
	"fmt"
	"strings"

	"github.com/spf13/cobra"

	"kermalux/firmware-host/journal/report"
	"kermalux/firmware-host/journal/store"
	"kermalux/procedures/catalog"
)

func init() {
	var storePath, session, serial, journalPath, out, formats, language string
	var latest, unverified bool
	var actionLevels []float64
	cmd := &cobra.Command{
		Use:   "report (--store PATH (--session ID | --serial SERIAL [--latest]) | --journal FILE) --out DIR",
		Short: "Render the acceptance report of a session as HTML, PDF and CSV",
		Long: `report renders the acceptance report of a session: a summary of verdicts and
what needs review, the results with their expanded uncertainties, charts, the
certificates, the corrections, the uncertainty budgets, the safety
acknowledgements with their times, the beam-on time, every reading, the
cautions and a place for the physicist's comment and signature.

From the workstation store, choose one session (--session) or an intensifier
(--serial: all its sessions, or only the newest with --latest); the report then
includes the intensifier's conversion factor history with the projected month,
and its 95 % band, at every limit the results were judged against. From a board journal file (--journal: the SQLite journal
or its "journal export --json" output), the last session is rendered unless
--session names another.

The report is in the language the session was run in (the bench's language,
journalled with the session), or the one --language names; the standard's
symbols, the units and every number are the same in each.

Files are written to DIR as report-<serial>-<date>-<session>.html, .pdf,
-results.csv and -readings.csv; their paths are printed.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			fmts, err := report.ParseFormats(formats)
			if err != nil {
				return withCode(exitUsage, err)
			}
			if _, err := catalog.Builtin(language); err != nil {
				return withCode(exitUsage, fmt.Errorf("--language: %w", err))
			}
			switch {
			case storePath != "" && journalPath != "":
				return withCode(exitUsage, errors.New("give --store or --journal, not both"))
			case storePath == "" && journalPath == "":
				return withCode(exitUsage, errors.New("give --store PATH or --journal FILE"))
			case journalPath != "" && (serial != "" || latest):
				return withCode(exitUsage, errors.New("--serial and --latest choose sessions of a store; with --journal use --session"))
			case storePath != "" && (session == "") == (serial == ""):
				return withCode(exitUsage, errors.New("with --store give either --session ID or --serial SERIAL"))
			case latest && serial == "":
				return withCode(exitUsage, errors.New("--latest goes with --serial"))
			}
			var reports []*report.Report
			if journalPath != "" {
				r, err := report.FromJournalChecked(cmd.Context(), journalPath, session, unverified)
				if err != nil {
					return withCode(exitFailure, err)
				}
				reports = append(reports, r)
			} else {
				if !store.Exists(storePath) {
					return withCode(exitFailure, fmt.Errorf("store %s does not exist (receive or import sessions first)", storePath))
				}
				st, err := store.Open(storePath)
				if err != nil {
					return withCode(exitFailure, err)
				}
				defer st.Close()
				reports, err = report.FromStore(cmd.Context(), st, report.Selection{Session: session, Serial: serial, Latest: latest, AllowUnverified: unverified}, actionLevels...)
				if err != nil {
					return withCode(exitFailure, err)
				}
			}
			for _, r := range reports {
				paths, err := r.WriteFiles(out, fmts, report.Options{Version: version, Language: language})
				for _, p := range paths {
					fmt.Fprintln(cmd.OutOrStdout(), p)
				}
				if err != nil {
					return withCode(exitFailure, err)
				}
			}
			return nil
		},
	}
	f := cmd.Flags()
	f.BoolVar(&unverified, "unverified", false, "render records that do not verify, stamped NOT VERIFIED on every page (default: refuse them)")
	f.StringVar(&storePath, "store", "", "workstation store: SQLite file or postgres:// URL")
	f.StringVar(&session, "session", "", "session id")
	f.StringVar(&serial, "serial", "", "intensifier serial number: report its sessions")
	f.BoolVar(&latest, "latest", false, "with --serial: only the newest session")
	f.StringVar(&journalPath, "journal", "", "board journal file, or its JSON-lines export")
	f.StringVar(&out, "out", "", "directory to write the report into")
	f.StringVar(&formats, "format", "html,pdf,csv", "comma-separated formats: html, pdf, csv")
	f.StringVar(&language, "language", "", "the report's language: "+strings.Join(catalog.Languages(), ", ")+" (default: the language the session was run in)")
	f.Float64SliceVar(&actionLevels, "action-level", nil, "the trend also projects to this fraction of baseline (repeatable; the recorded limits are always projected)")
	_ = cmd.MarkFlagRequired("out")
	register(cmd)
}
