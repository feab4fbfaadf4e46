//go:build !board

package main

import (
	"fmt"

	"github.com/spf13/cobra"

	"kermalux/firmware-host/journal/report"
	"kermalux/firmware-host/journal/store"
)

func init() {
	var storePath, quantity, mode, plot string
	var actionLevels []float64
	var csvOut, jsonOut, unverified bool
	cmd := &cobra.Command{
		Use:   "trend SERIAL --store PATH [--quantity conversion_factor] [--plot FILE.png|.svg]",
		Short: "Show one intensifier's results over the years and when it reaches each configured limit",
		Long: `trend prints an intensifier's history of one quantity (by default the
conversion factor), one table per field mode: date, site and room, value with
its expanded uncertainty, fraction of baseline and verdict (simulated sessions
are marked, shown and not fitted); then the annual rate of change from a
least-squares line with its uncertainty, and for every limit the latest result
was judged against (the bench's specification, action levels and baseline
rule, journalled with each result) the month the line reaches it with the
95 % confidence band of that date. --action-level adds a fraction of baseline
(a local decision; repeat it for several).
With --plot it also draws the chart (one file per field mode when there are
several). With --csv it prints the history as CSV, with --json everything as
one JSON document, instead of the table.`,
		Args:              exactArgs(1, "the intensifier's serial number, e.g. kermalux trend HV-2291 --store office.db"),
		ValidArgsFunction: completeSerials(&storePath),
		RunE: func(cmd *cobra.Command, args []string) error {
			for _, a := range actionLevels {
				if a <= 0 || a >= 10 {
					return withCode(exitUsage, fmt.Errorf("--action-level %g: give a fraction of baseline such as 0.5", a))
				}
			}
			if csvOut && jsonOut {
				return withCode(exitUsage, fmt.Errorf("give --csv or --json, not both"))
			}
			if !store.Exists(storePath) {
				return withCode(exitFailure, fmt.Errorf("store %s does not exist (receive or import sessions first)", storePath))
			}
			st, err := store.Open(storePath)
			if err != nil {
				return withCode(exitFailure, err)
			}
			defer st.Close()
			// A trend is computed from stored results: verify every session
			// of the intensifier first.
			problems, err := report.VerifyStoreSerial(cmd.Context(), st, args[0])
			if err != nil {
				return withCode(exitFailure, err)
			}
			if len(problems) > 0 && !unverified {
				return withCode(exitFailure, &report.UnverifiedError{Source: "store " + storePath + " intensifier " + args[0], Problems: problems})
			}
			for _, p := range problems {
				fmt.Fprintln(cmd.ErrOrStderr(), "NOT VERIFIED:", p)
			}
			trends, err := report.LoadTrends(cmd.Context(), report.StoreHistory{Store: st}, args[0], quantity, actionLevels...)
			if err != nil {
				return withCode(exitFailure, err)
			}
			if trends = report.FilterMode(trends, mode); len(trends) == 0 {
				return withCode(exitFailure, fmt.Errorf("intensifier %s has no %s results in field mode %q", args[0], quantity, mode))
			}
			switch {
			case csvOut:
				err = report.WriteTrendCSV(cmd.OutOrStdout(), trends)
			case jsonOut:
				err = report.WriteTrendJSON(cmd.OutOrStdout(), trends)
			default:
				err = report.WriteTrendText(cmd.OutOrStdout(), trends)
			}
			if err != nil {
				return withCode(exitFailure, err)
			}
			if plot != "" {
				paths, err := report.WriteTrendCharts(plot, trends)
				for _, p := range paths {
					fmt.Fprintln(cmd.ErrOrStderr(), "chart:", p)
				}
				if err != nil {
					return withCode(exitFailure, err)
				}
			}
			return nil
		},
	}
	f := cmd.Flags()
	f.BoolVar(&unverified, "unverified", false, "show the trend even when stored sessions do not verify (each problem printed first)")
	f.StringVar(&storePath, "store", "", "workstation store: SQLite file or postgres:// URL")
	f.StringVar(&quantity, "quantity", "conversion_factor", "result quantity: conversion_factor, contrast_ratio, non_uniformity, input_kerma_rate, ...")
	f.StringVar(&mode, "field-mode", "", "only this field mode")
	f.StringVar(&plot, "plot", "", "write the chart to FILE.png or FILE.svg")
	f.Float64SliceVar(&actionLevels, "action-level", nil, "also project to this fraction of baseline (repeatable; the recorded limits are always projected)")
	f.BoolVar(&csvOut, "csv", false, "print the history as CSV")
	f.BoolVar(&jsonOut, "json", false, "print the history, fit and projections as JSON")
	_ = cmd.RegisterFlagCompletionFunc("quantity", completeQuantities)
	_ = cmd.RegisterFlagCompletionFunc("store", cobra.FixedCompletions(nil, cobra.ShellCompDirectiveDefault))
	_ = cmd.MarkFlagRequired("store")
	register(cmd)
}

// exactArgs wants n arguments and names what is missing: "missing the
// intensifier's serial number, e.g. ...".
func exactArgs(n int, what string) cobra.PositionalArgs {
	return func(c *cobra.Command, args []string) error {
		switch {
		case len(args) < n:
			return withCode(exitUsage, fmt.Errorf("%s: missing %s (usage: %s)", c.CommandPath(), what, c.UseLine()))
		case len(args) > n:
			return withCode(exitUsage, fmt.Errorf("%s: %d arguments, want %d: %s (usage: %s)", c.CommandPath(), len(args), n, what, c.UseLine()))
		}
		return nil
	}
}
