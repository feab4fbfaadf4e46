//go:build !board

package main

import (
	"context"

	"kermalux/firmware-host/journal/report"
)

// reportRenderer returns the function the demo uses to render its report
// in the given formats (a comma-separated list).
func reportRenderer(formats string) (func(ctx context.Context, journal, session, dir string) ([]string, error), error) {
	fs, err := report.ParseFormats(formats)
	if err != nil {
		return nil, err
	}
	return func(ctx context.Context, journal, session, dir string) ([]string, error) {
		rep, err := report.FromJournal(ctx, journal, session)
		if err != nil {
			return nil, err
		}
		return rep.WriteFiles(dir, fs, report.Options{Version: version})
	}, nil
}

// buildFlavour names the build in --version.
const buildFlavour = "workstation build"
