package main

import (
	"fmt"
	"os"

	"github.com/spf13/cobra"

	"kermalux/firmware-host/journal/transfer"
)

func init() {
	var bf boardFlags
	var out string
	var batch int
	cmd := &cobra.Command{
		Use:   "bundle --out FILE",
		Short: "Write the whole journal to a signed file for a USB stick (sites without network)",
		Long: `bundle writes every record of the journal to FILE in signed batches with a
closing signature over the whole file. Carry it to the workstation and run
'kermalux import': it applies the same checks as a push and stores each
record once, however many times the same bundle is imported.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			j, err := bf.open()
			if err != nil {
				return err
			}
			defer j.Close()
			tmp := out + ".partial"
			f, err := os.OpenFile(tmp, os.O_WRONLY|os.O_CREATE|os.O_TRUNC, 0o644)
			if err != nil {
				return withCode(exitFailure, err)
			}
			sum, err := transfer.WriteBundle(cmd.Context(), j, f, batch,
				func(total int64) transfer.Progress { return transfer.NewProgress(os.Stderr, total, "bundle") })
			if err == nil {
				err = f.Sync()
			}
			if cerr := f.Close(); err == nil {
				err = cerr
			}
			if err == nil {
				err = os.Rename(tmp, out)
			}
			if err != nil {
				os.Remove(tmp)
				return withCode(exitFailure, fmt.Errorf("bundle %s: %w", out, err))
			}
			fmt.Fprintf(cmd.OutOrStdout(), "wrote %s: %d records of %d sessions in %d batches\n", out, sum.Records, sum.Sessions, sum.Batches)
			return nil
		},
	}
	bf.add(cmd)
	cmd.Flags().StringVar(&out, "out", "", "bundle file to write")
	cmd.Flags().IntVar(&batch, "batch", 500, "records per batch")
	_ = cmd.MarkFlagRequired("out")
	register(cmd)
}
