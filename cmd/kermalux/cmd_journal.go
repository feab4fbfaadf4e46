package main

import (
	"bufio"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"text/tabwriter"

	"github.com/spf13/cobra"

	"kermalux/firmware-host/journal"
)

// defaultJournal is where the board keeps its journal.
const defaultJournal = "/var/lib/kermalux/journal.db"

// boardFlags select the board journal and its key.
type boardFlags struct {
	journal, keyDir, keyFile string
}

func (f *boardFlags) add(cmd *cobra.Command) {
	cmd.Flags().StringVar(&f.journal, "journal", defaultJournal, "board journal file")
	cmd.Flags().StringVar(&f.keyDir, "key-dir", "", "directory of the board key (default: board-key/ beside the journal)")
	cmd.Flags().StringVar(&f.keyFile, "key-file", "", "the board's private key file (overrides --key-dir)")
}

func (f *boardFlags) options() journal.Options {
	return journal.Options{KeyDir: f.keyDir, KeyPath: f.keyFile, SoftwareVersion: version}
}

// open opens an existing journal (never creates one by mistake).
func (f *boardFlags) open() (*journal.Journal, error) {
	if _, err := os.Stat(f.journal); err != nil {
		return nil, withCode(exitFailure, fmt.Errorf("journal: %w", err))
	}
	j, err := journal.Open(f.journal, f.options())
	if err != nil {
		return nil, withCode(exitFailure, err)
	}
	return j, nil
}

func init() {
	parent := &cobra.Command{
		Use:   "journal",
		Short: "Check, list and export the board's session journal; show the board key",
	}

	var verifyKey string
	var verifyJSON bool
	verify := &cobra.Command{
		Use:   "verify FILE",
		Short: "Check a journal's schema, hash chain and signatures; name the first bad record",
		Long: `verify re-reads every record of a journal file and checks the schema version,
each session's hash chain, every record's signature and each session's signed
head (which catches records cut from the end). It names the first bad record
of each session (sequence number, kind, what is wrong, a hint) and exits 1 if
anything is wrong, 0 if the journal is good.`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			var pub []byte
			if verifyKey != "" {
				k, err := journal.ParsePublicKey(verifyKey)
				if err != nil {
					return withCode(exitUsage, err)
				}
				pub = k
			}
			rep, err := journal.VerifyKey(cmd.Context(), args[0], pub)
			if err != nil {
				return withCode(exitFailure, err)
			}
			out := cmd.OutOrStdout()
			if verifyJSON {
				enc := json.NewEncoder(out)
				enc.SetIndent("", "  ")
				enc.Encode(rep)
			} else {
				for _, p := range rep.Problems {
					fmt.Fprintln(out, "BAD", p)
				}
				fmt.Fprintf(out, "%s: schema %d, board key %s, %d sessions (%d unfinished), %d records\n",
					args[0], rep.Schema, rep.BoardKey, rep.Sessions, len(rep.Unfinished), rep.Records)
			}
			if !rep.OK() {
				return withCode(exitFailure, fmt.Errorf("journal %s is bad: %d problem(s)", args[0], len(rep.Problems)))
			}
			if !verifyJSON {
				fmt.Fprintln(out, "journal is good")
			}
			return nil
		},
	}
	verify.Flags().StringVar(&verifyKey, "key", "", "also require this board public key (hex)")
	verify.Flags().BoolVar(&verifyJSON, "json", false, "print the report as JSON")

	var exportJSON bool
	export := &cobra.Command{
		Use:   "export FILE --json",
		Short: "Print every record of a journal, one JSON object per line",
		Long: `export prints every record of a journal file, session by session, one JSON
object per line: the envelope fields (seq, session, kind, wall, mono_ns,
boot_id, payload) with prev, hash and sig. It does not check them; run verify.`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			if !exportJSON {
				return withCode(exitUsage, errors.New("export writes JSON lines only: add --json"))
			}
			w := bufio.NewWriter(cmd.OutOrStdout())
			enc := json.NewEncoder(w)
			err := journal.Export(cmd.Context(), args[0], func(r journal.Record) error { return enc.Encode(r) })
			if ferr := w.Flush(); err == nil {
				err = ferr
			}
			if err != nil {
				return withCode(exitFailure, err)
			}
			return nil
		},
	}
	export.Flags().BoolVar(&exportJSON, "json", false, "one JSON object per record per line")

	sessions := &cobra.Command{
		Use:   "sessions FILE",
		Short: "List a journal's sessions",
		Args:  cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			list, err := journal.ListSessions(cmd.Context(), args[0])
			if err != nil {
				return withCode(exitFailure, err)
			}
			tw := tabwriter.NewWriter(cmd.OutOrStdout(), 2, 4, 2, ' ', 0)
			fmt.Fprintln(tw, "SESSION\tSTARTED\tSITE\tROOM\tSERIAL\tRECORDS\tSTATE")
			for _, s := range list {
				state := "unfinished"
				if s.End != nil {
					state = s.End.Outcome
				}
				fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%d\t%s\n", s.ID, s.Session.Started.UTC().Format("2006-01-02 15:04"),
					s.Session.Site, s.Session.Room, s.Session.IntensifierSerial, s.Last, state)
			}
			return tw.Flush()
		},
	}

	var kf boardFlags
	key := &cobra.Command{
		Use:   "key",
		Short: "Print the board's public key (creating the key on first use), for enrolling at the workstation",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			priv, err := journal.LoadOrCreateKey(kf.options().KeyFile(kf.journal))
			if err != nil {
				return withCode(exitFailure, err)
			}
			fmt.Fprintf(cmd.OutOrStdout(), "%x\n", priv.Public())
			return nil
		},
	}
	kf.add(key)

	parent.AddCommand(verify, export, sessions, key)
	register(parent)
}
