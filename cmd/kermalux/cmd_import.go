package main

import (
	"fmt"
	"os"

	"github.com/spf13/cobra"

	"kermalux/firmware-host/journal/store"
	"kermalux/firmware-host/journal/transfer"
)

func init() {
	var path string
	cmd := &cobra.Command{
		Use:   "import --store PATH FILE",
		Short: "Apply a bundle written by 'kermalux bundle' to the workstation store",
		Long: `import checks a bundle (its closing signature, every batch's signature and
chain, the board enrolled, continuity with what is stored) and stores it in one
transaction: a bundle with anything wrong stores nothing and the error names
the line. Records already stored are skipped, so importing twice is harmless.`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			f, err := os.Open(args[0])
			if err != nil {
				return withCode(exitFailure, err)
			}
			defer f.Close()
			b, err := transfer.ReadBundle(f, args[0])
			if err != nil {
				return withCode(exitFailure, err)
			}
			st, err := store.Open(path)
			if err != nil {
				return withCode(exitFailure, err)
			}
			defer st.Close()
			sum, err := transfer.Import(cmd.Context(), st, b, args[0], transfer.NewProgress(os.Stderr, b.Records, "import"))
			if err != nil {
				return withCode(exitFailure, err)
			}
			fmt.Fprintln(cmd.OutOrStdout(), sum)
			return nil
		},
	}
	cmd.Flags().StringVar(&path, "store", "", "workstation store file")
	_ = cmd.MarkFlagRequired("store")
	register(cmd)
}
