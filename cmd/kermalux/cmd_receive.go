package main

import (
	"fmt"
	"log/slog"
	"net"
	"os"
	"os/signal"
	"syscall"

	"github.com/spf13/cobra"

	"kermalux/firmware-host/journal/store"
	"kermalux/firmware-host/journal/transfer"
)

func init() {
	var listen, path, cert, key string
	cmd := &cobra.Command{
		Use:   "receive --listen ADDR --store PATH",
		Short: "Run the workstation's receiver: accept pushes from enrolled boards into the store",
		Long: `receive serves the sync protocol on ADDR and stores what enrolled boards push.
Each batch is checked (board enrolled, signatures, chain continuity with what
is stored) and stored whole or refused with HTTP 403 and a reason. With --cert
and --key it serves HTTPS; without them the signatures still protect the
records' integrity, but not their privacy on the network.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			st, err := store.Open(path)
			if err != nil {
				return withCode(exitFailure, err)
			}
			defer st.Close()
			ctx, stop := signal.NotifyContext(cmd.Context(), os.Interrupt, syscall.SIGTERM)
			defer stop()
			log := slog.New(slog.NewTextHandler(os.Stderr, &slog.HandlerOptions{Level: slog.LevelInfo}))
			err = transfer.Serve(ctx, listen, st, transfer.ServeOptions{CertFile: cert, KeyFile: key, Log: log,
				Ready: func(a net.Addr) { fmt.Fprintf(cmd.OutOrStdout(), "receiving on %s into %s\n", a, path) }})
			if err != nil {
				return withCode(exitFailure, err)
			}
			return nil
		},
	}
	cmd.Flags().StringVar(&listen, "listen", ":8470", "address to listen on")
	cmd.Flags().StringVar(&path, "store", "", "workstation store file (created if missing)")
	cmd.Flags().StringVar(&cert, "cert", "", "TLS certificate (PEM)")
	cmd.Flags().StringVar(&key, "key", "", "TLS private key (PEM)")
	_ = cmd.MarkFlagRequired("store")
	register(cmd)
}
