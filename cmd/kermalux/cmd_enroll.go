//go:build !board

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
	var target, key, keyFile, name string
	var revoke bool
	cmd := &cobra.Command{
		Use:   "enroll --store STORE --key HEX --name NAME | --revoke --key HEX",
		Short: "Admit a board's public key to the workstation store, or revoke it",
		Long: `enroll admits a board to the store: only enrolled boards' pushes and bundles are
accepted. Take the key from 'kermalux journal key' on the board (64 hex digits),
given inline with --key or in a file with --key-file. Enrolling a key again
renames the board. STORE is an SQLite file (created if missing) or a
postgres:// URL.

With --revoke the key is refused from now on (a lost or stolen board): what it
sent before stays, and every refused push or bundle is named in the store's log.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			if (key == "") == (keyFile == "") {
				return withCode(exitUsage, errors.New("give exactly one of --key HEX and --key-file FILE"))
			}
			if !revoke && strings.TrimSpace(name) == "" {
				return withCode(exitUsage, errors.New("--name is required to enroll a board"))
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
			st, err := store.Open(target)
			if err != nil {
				return withCode(exitFailure, err)
			}
			defer st.Close()
			if revoke {
				b, err := st.Revoke(cmd.Context(), pub)
				if err != nil {
					return withCode(exitFailure, err)
				}
				fmt.Fprintf(cmd.OutOrStdout(), "revoked board %q (%x) in %s: its pushes and bundles are refused from now on\n", b.Name, []byte(pub), st.Path())
				return nil
			}
			if err := st.Enroll(cmd.Context(), pub, name); err != nil {
				return withCode(exitFailure, err)
			}
			fmt.Fprintf(cmd.OutOrStdout(), "enrolled board %q (%x) in %s (store id %s)\n", name, []byte(pub), st.Path(), st.ID())
			return nil
		},
	}
	cmd.Flags().StringVar(&target, "store", "", "workstation store: SQLite file (created if missing) or postgres:// URL")
	cmd.Flags().StringVar(&key, "key", "", "the board's public key, 64 hex digits")
	cmd.Flags().StringVar(&keyFile, "key-file", "", "file holding the board's public key")
	cmd.Flags().StringVar(&name, "name", "", "a name for the board, e.g. \"north-van-board-2\"")
	cmd.Flags().BoolVar(&revoke, "revoke", false, "revoke the key instead of enrolling it")
	_ = cmd.MarkFlagRequired("store")
	register(cmd)
}
