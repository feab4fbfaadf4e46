package main

import (
	"fmt"
	"os"

	"github.com/spf13/cobra"

	"kermalux/firmware-host/journal/transfer"
	"kermalux/firmware-host/journal/transfer/push"
)

func init() {
	var bf boardFlags
	var out, audience string
	var segment int
	cmd := &cobra.Command{
		Use:   "bundle --out FILE",
		Short: "Write the whole journal to a signed file for a USB stick (sites without network)",
		Long: `bundle writes every record of the journal to FILE as compressed signed segments
with a closing signature over the whole file. Carry it to the workstation and
run 'kermalux import': it applies the same checks as a push and stores each
record once, however many times the same bundle is imported. With --for STORE-ID
(printed by 'kermalux enroll') only that store accepts the bundle.`,
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
			sum, err := push.WriteBundle(cmd.Context(), j, f, audience, segment,
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
			fmt.Fprintf(cmd.OutOrStdout(), "wrote %s: %d records of %d sessions in %d segments\n", out, sum.Records, sum.Sessions, sum.Segments)
			return nil
		},
	}
	bf.add(cmd)
	cmd.Flags().StringVar(&out, "out", "", "bundle file to write")
	cmd.Flags().StringVar(&audience, "for", "", "the id of the only store that may import the bundle (default: any store the board is enrolled in)")
	cmd.Flags().IntVar(&segment, "segment", push.DefaultSegment, "records per signed segment")
	_ = cmd.MarkFlagRequired("out")
	register(cmd)
}
