package main

import (
	"fmt"
	"os"

	"github.com/spf13/cobra"

	"kermalux/firmware-host/journal/transfer"
)

func init() {
	var bf boardFlags
	var to, ca string
	var batch int
	cmd := &cobra.Command{
		Use:   "push --to URL",
		Short: "Send the journal's new records to a workstation running 'kermalux receive'",
		Long: `push asks the workstation which records of each session it already has and
sends the rest in signed batches. An interrupted push (network cut, workstation
restarted) can simply be run again, or it resumes by itself: every record ends
up stored once. The board must be enrolled at the workstation first
('kermalux journal key' prints the key to enroll).`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			j, err := bf.open()
			if err != nil {
				return err
			}
			defer j.Close()
			opts := transfer.PushOptions{URL: to, BatchSize: batch,
				NewProgress: func(total int64) transfer.Progress { return transfer.NewProgress(os.Stderr, total, "push") }}
			if ca != "" {
				if opts.Client, err = transfer.ClientWithCA(ca); err != nil {
					return withCode(exitUsage, err)
				}
			}
			sum, err := transfer.Push(cmd.Context(), j, opts)
			if err != nil {
				if sum.Sent > 0 {
					err = fmt.Errorf("%w (%d records were stored before this; run push again to resume)", err, sum.Sent)
				}
				return withCode(exitFailure, err)
			}
			fmt.Fprintln(cmd.OutOrStdout(), sum)
			return nil
		},
	}
	bf.add(cmd)
	cmd.Flags().StringVar(&to, "to", "", "workstation URL, e.g. http://office-pc:8470")
	cmd.Flags().StringVar(&ca, "ca", "", "PEM file of the certificate authority that signed the workstation's TLS certificate")
	cmd.Flags().IntVar(&batch, "batch", 500, "records per batch")
	_ = cmd.MarkFlagRequired("to")
	register(cmd)
}
