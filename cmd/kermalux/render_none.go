//go:build board

package main

import "context"

// reportRenderer: the board build carries no report renderer (charts, PDF
// and their fonts are workstation work); the journal syncs to the office,
// where `kermalux report` renders it.
func reportRenderer(formats string) (func(ctx context.Context, journal, session, dir string) ([]string, error), error) {
	return nil, nil
}

// buildFlavour names the build in --version.
const buildFlavour = "board build"
