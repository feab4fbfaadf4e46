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
	var to, ca string
	var segment int
	cmd := &cobra.Command{
		Use:   "push --to URL",
		Short: "Send the journal's new records to a workstation running 'kermalux receive'",
		Long: `push asks the workstation which records of each session it already has and
sends the rest as one compressed stream of signed segments, each stored as it
arrives. An interrupted push (network cut, workstation restarted) can simply
be run again, or it resumes by itself: every record ends up stored once. If the
journal and the store disagree about a record the store already has (a
restored old copy of the journal), push refuses and names both heads. The
board must be enrolled at the workstation first ('kermalux journal key'
prints the key to enroll). Use https:// with --ca: over plain http:// the
signatures protect the records' integrity and origin, not their privacy.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			j, err := bf.open()
			if err != nil {
				return err
			}
			defer j.Close()
			if push.PlainHTTP(to) {
				fmt.Fprintf(cmd.ErrOrStderr(), "warning: %s is plain HTTP: the records travel unencrypted (their signatures still show any change); use https:// and --ca\n", to)
			}
			opts := push.Options{URL: to, SegmentSize: segment,
				NewProgress: func(total int64) transfer.Progress { return transfer.NewProgress(os.Stderr, total, "push") }}
			if ca != "" {
				if opts.Client, err = push.ClientWithCA(ca); err != nil {
					return withCode(exitUsage, err)
				}
			}
			sum, err := push.Push(cmd.Context(), j, opts)
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
	cmd.Flags().StringVar(&to, "to", "", "workstation URL, e.g. https://office-pc:8470")
	cmd.Flags().StringVar(&ca, "ca", "", "PEM file of the certificate authority that signed the workstation's TLS certificate")
	cmd.Flags().IntVar(&segment, "segment", push.DefaultSegment, "records per signed segment")
	_ = cmd.MarkFlagRequired("to")
	register(cmd)
}
