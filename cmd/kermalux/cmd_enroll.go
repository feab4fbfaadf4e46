package main

import (
	"errors"
	"fmt"
	"os"
	"strings"

	"github.com/spf13/cobra"

	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/store"
)

func init() {
	var path, key, keyFile, name string
	cmd := &cobra.Command{
		Use:   "enroll --store PATH --key HEX --name NAME",
		Short: "Admit a board's public key to the workstation store",
		Long: `enroll admits a board to the store: only enrolled boards' pushes and bundles are
accepted. Take the key from 'kermalux journal key' on the board (64 hex digits),
given inline with --key or in a file with --key-file. Enrolling a key again
renames the board.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			if (key == "") == (keyFile == "") {
				return withCode(exitUsage, errors.New("give exactly one of --key HEX and --key-file FILE"))
			}
			if keyFile != "" {
				b, err := os.ReadFile(keyFile)
				if err != nil {
					return withCode(exitFailure, fmt.Errorf("key file: %w", err))
				}
				key = strings.TrimSpace(string(b))
			}
			pub, err := journal.ParsePublicKey(key)
			if err != nil {
				if keyFile != "" {
					err = fmt.Errorf("%s line 1: %w", keyFile, err)
				}
				return withCode(exitUsage, err)
			}
			st, err := store.Open(path)
			if err != nil {
				return withCode(exitFailure, err)
			}
			defer st.Close()
			if err := st.Enroll(cmd.Context(), pub, name); err != nil {
				return withCode(exitFailure, err)
			}
			fmt.Fprintf(cmd.OutOrStdout(), "enrolled board %q (%x) in %s\n", name, []byte(pub), path)
			return nil
		},
	}
	cmd.Flags().StringVar(&path, "store", "", "workstation store file (created if missing)")
	cmd.Flags().StringVar(&key, "key", "", "the board's public key, 64 hex digits")
	cmd.Flags().StringVar(&keyFile, "key-file", "", "file holding the board's public key")
	cmd.Flags().StringVar(&name, "name", "", "a name for the board, e.g. \"north-van-board-2\"")
	_ = cmd.MarkFlagRequired("store")
	_ = cmd.MarkFlagRequired("name")
	register(cmd)
}
