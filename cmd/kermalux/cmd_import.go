//go:build !board

package main

import (
	"fmt"
	"os"

	"github.com/spf13/cobra"

	"kermalux/firmware-host/journal/store"
	"kermalux/firmware-host/journal/transfer"
	"kermalux/firmware-host/journal/transfer/receive"
)

func init() {
	var target string
	cmd := &cobra.Command{
		Use:   "import --store STORE FILE",
		Short: "Apply a bundle written by 'kermalux bundle' to the workstation store",
		Long: `import reads a bundle as a stream and checks it (the board enrolled and not
revoked, every segment's signed head and hash chain, continuity with what is
stored, the closing signature over all segments) and stores it in one
transaction: a bundle with anything wrong stores nothing and the error names
the segment and record. Records already stored are skipped, so importing twice
is harmless. STORE is an SQLite file or a postgres:// URL.`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			f, err := os.Open(args[0])
			if err != nil {
				return withCode(exitFailure, err)
			}
			defer f.Close()
			var size int64
			if fi, err := f.Stat(); err == nil {
				size = fi.Size()
			}
			st, err := store.Open(target)
			if err != nil {
				return withCode(exitFailure, err)
			}
			defer st.Close()
			prog := transfer.NewProgress(os.Stderr, size/40, "import") // about 40 bytes a record
			sum, err := receive.Import(cmd.Context(), st, f, args[0], prog)
			if err != nil {
				return withCode(exitFailure, err)
			}
			fmt.Fprintln(cmd.OutOrStdout(), sum)
			return nil
		},
	}
	cmd.Flags().StringVar(&target, "store", "", "workstation store: SQLite file or postgres:// URL")
	_ = cmd.MarkFlagRequired("store")
	register(cmd)
}
