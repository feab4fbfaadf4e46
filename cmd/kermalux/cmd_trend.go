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
	var actionLevel float64
	var csvOut bool
	cmd := &cobra.Command{
		Use:   "trend SERIAL --store PATH [--quantity conversion_factor] [--plot FILE.png|.svg]",
		Short: "Show one intensifier's results over the years and when it reaches the action level",
		Long: `trend prints an intensifier's history of one quantity (by default the
conversion factor), one table per field mode: date, site and room, value with
its expanded uncertainty, fraction of baseline and verdict; then the annual
rate of change from a least-squares line and the date that line reaches the
action level (a fraction of baseline; a local decision, 0.5 unless set).
With --plot it also draws the chart (one file per field mode when there are
several). With --csv it prints the history as CSV instead of the table.`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			if actionLevel <= 0 || actionLevel >= 10 {
				return withCode(exitUsage, fmt.Errorf("--action-level %g: give a fraction of baseline such as 0.5", actionLevel))
			}
			if !store.Exists(storePath) {
				return withCode(exitFailure, fmt.Errorf("store %s does not exist (receive or import sessions first)", storePath))
			}
			st, err := store.Open(storePath)
			if err != nil {
				return withCode(exitFailure, err)
			}
			defer st.Close()
			trends, err := report.LoadTrends(cmd.Context(), report.StoreHistory{Store: st}, args[0], quantity, actionLevel)
			if err != nil {
				return withCode(exitFailure, err)
			}
			if trends = report.FilterMode(trends, mode); len(trends) == 0 {
				return withCode(exitFailure, fmt.Errorf("intensifier %s has no %s results in field mode %q", args[0], quantity, mode))
			}
			if csvOut {
				err = report.WriteTrendCSV(cmd.OutOrStdout(), trends)
			} else {
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
	f.StringVar(&storePath, "store", "", "workstation store file")
	f.StringVar(&quantity, "quantity", "conversion_factor", "result quantity: conversion_factor, contrast_ratio, non_uniformity, input_kerma_rate, ...")
	f.StringVar(&mode, "field-mode", "", "only this field mode")
	f.StringVar(&plot, "plot", "", "write the chart to FILE.png or FILE.svg")
	f.Float64Var(&actionLevel, "action-level", report.DefaultActionLevel, "action level as a fraction of baseline")
	f.BoolVar(&csvOut, "csv", false, "print the history as CSV")
	_ = cmd.MarkFlagRequired("store")
	register(cmd)
}
