package main

import (
	"bufio"
	"context"
	"crypto/ed25519"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"text/tabwriter"
	"time"

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

	var verifyKey, verifyStore string
	var verifyJSON bool
	verify := &cobra.Command{
		Use:   "verify FILE",
		Short: "Check a journal's schema, hash chain, signatures and high-water mark; name the first bad record",
		Long: `verify re-reads every record of a journal file and checks SQLite's integrity,
the schema version, each session's hash chain, every record's signature, each
session's signed head (which catches records cut from the end) and the
journal's high-water mark (journal.db.mark beside it, which catches a deleted,
cut or damaged -wal file and a journal cut to nothing). It says which board
key signed the journal; with --key it requires that key, with --store it
requires the key to be enrolled in that workstation store and the journal to
hold at least what the store holds of each session. It names the first bad
record of each session (sequence number, kind, what is wrong, a hint) and
exits 1 if anything is wrong, 0 if the journal is good. It opens the file
read-only: it never checkpoints or deletes the -wal file.`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			var opts journal.VerifyOptions
			if verifyKey != "" {
				k, err := journal.ParsePublicKey(verifyKey)
				if err != nil {
					return withCode(exitUsage, err)
				}
				opts.Key = k
			}
			if verifyStore != "" {
				st, err := openStoreForVerify(verifyStore)
				if err != nil {
					return withCode(exitFailure, err)
				}
				defer st.Close()
				opts.Enrolled, opts.StoreHead = st.enrolled, st.head
			}
			rep, err := journal.VerifyWith(cmd.Context(), args[0], opts)
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
				fmt.Fprintf(out, "%s: schema %d, %d sessions (%d unfinished), %d records\n",
					args[0], rep.Schema, rep.Sessions, len(rep.Unfinished), rep.Records)
				switch {
				case rep.BoardKey == "":
				case rep.EnrolledAs != "":
					fmt.Fprintf(out, "signed by board key %s, enrolled in %s as %q\n", rep.BoardKey, verifyStore, rep.EnrolledAs)
				case opts.Key != nil && rep.OK():
					fmt.Fprintf(out, "signed by board key %s, the key given\n", rep.BoardKey)
				default:
					fmt.Fprintf(out, "signed by board key %s\n", rep.BoardKey)
					if opts.Key == nil && verifyStore == "" {
						fmt.Fprintln(out, "not compared with an enrolled key: give --store STORE or --key KEY to know the board that signed it is yours")
					}
				}
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
	verify.Flags().StringVar(&verifyStore, "store", "", "workstation store: require the key enrolled there, and the journal to hold what the store holds")
	verify.Flags().BoolVar(&verifyJSON, "json", false, "print the report as JSON")

	var exportJSON, exportUnverified bool
	export := &cobra.Command{
		Use:   "export FILE",
		Short: "Print every record of a journal, one JSON object per line",
		Long: `export prints every record of a journal file, session by session, one JSON
object per line (its only format; --json is accepted and changes nothing):
the envelope fields (seq, session, kind, wall, mono_ns,
boot_id, payload) with prev, hash and sig. It verifies the journal first (as
journal verify does) and refuses one that does not verify, naming the first
bad record; --unverified exports it anyway, for examining the damage.`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			if err := verifyFirst(cmd.Context(), args[0], exportUnverified, cmd.ErrOrStderr()); err != nil {
				return err
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
	export.Flags().BoolVar(&exportJSON, "json", true, "one JSON object per record per line (the only format)")
	export.Flags().BoolVar(&exportUnverified, "unverified", false, "export a journal that does not verify (its records cannot be trusted)")

	var sessionsJournal string
	var sessionsJSON bool
	sessions := &cobra.Command{
		Use:   "sessions FILE",
		Short: "List a journal's sessions (FILE or --journal FILE)",
		Args:  cobra.MaximumNArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			path, err := journalArg(args, sessionsJournal, cmd.Flags().Changed("journal"))
			if err != nil {
				return err
			}
			list, err := journal.ListSessions(cmd.Context(), path)
			if err != nil {
				return withCode(exitFailure, err)
			}
			if sessionsJSON {
				out := []sessionJSON{}
				for _, s := range list {
					sj := sessionJSON{ID: s.ID, Started: s.Session.Started, Site: s.Session.Site, Room: s.Session.Room,
						Serial: s.Session.IntensifierSerial, Procedure: s.Session.Procedure, Records: s.Last, State: "unfinished", Simulated: s.Session.Simulated}
					if s.End != nil {
						sj.State = s.End.Outcome
					}
					out = append(out, sj)
				}
				return writeJSON(cmd.OutOrStdout(), out)
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
	sessions.Flags().StringVar(&sessionsJournal, "journal", defaultJournal, "board journal file (instead of FILE)")
	sessions.Flags().BoolVar(&sessionsJSON, "json", false, "print the sessions as a JSON array")

	var kf boardFlags
	key := &cobra.Command{
		Use:   "key [FILE]",
		Short: "Print the board's public key (creating the key on first use), for enrolling at the workstation",
		Long: `key prints the public key of the board whose journal is FILE (or --journal):
the key beside the journal (board-key/, or --key-dir / --key-file), created on
first use. For a journal copied away from its board, with no key beside it, it
prints the board key the journal records.`,
		Args: cobra.MaximumNArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			path, err := journalArg(args, kf.journal, cmd.Flags().Changed("journal"))
			if err != nil {
				return err
			}
			kf.journal = path
			keyFile := kf.options().KeyFile(kf.journal)
			if _, serr := os.Stat(keyFile); len(args) == 1 && errors.Is(serr, os.ErrNotExist) {
				if owner, ferr := journal.FileKey(cmd.Context(), kf.journal); ferr == nil && owner != "" {
					fmt.Fprintln(cmd.OutOrStdout(), owner)
					return nil
				}
			}
			var priv ed25519.PrivateKey
			if _, serr := os.Stat(kf.journal); serr == nil {
				// The journal exists: its key must exist too, and be the one
				// the journal was written with (never a fresh one).
				if priv, err = journal.LoadKey(keyFile); err != nil {
					return withCode(exitFailure, err)
				}
				owner, err := journal.FileKey(cmd.Context(), kf.journal)
				if err != nil {
					return withCode(exitFailure, err)
				}
				if pub := hex.EncodeToString(priv.Public().(ed25519.PublicKey)); owner != "" && owner != pub {
					return withCode(exitFailure, fmt.Errorf("%w: journal %s was written with board key %s, the key file %s holds %s", journal.ErrWrongBoard, kf.journal, owner, keyFile, pub))
				}
			} else if priv, err = journal.LoadOrCreateKey(keyFile); err != nil {
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

// verifyFirst verifies the journal at path before its records are read
// for anything: a journal that does not verify is refused, naming its
// first problem, unless unverified is set; then the problems are printed
// to warn and the caller goes on.
func verifyFirst(ctx context.Context, path string, unverified bool, warn io.Writer) error {
	rep, err := journal.Verify(ctx, path)
	if err != nil {
		return withCode(exitFailure, err)
	}
	if rep.OK() {
		return nil
	}
	if !unverified {
		return withCode(exitFailure, fmt.Errorf("journal %s does not verify, refused: %s (run kermalux journal verify %s)", path, rep.Problems[0], path))
	}
	for _, p := range rep.Problems {
		fmt.Fprintln(warn, "NOT VERIFIED:", p)
	}
	return nil
}

// sessionJSON is one session in `journal sessions --json`.
type sessionJSON struct {
	ID        string    `json:"session"`
	Started   time.Time `json:"started"`
	Site      string    `json:"site"`
	Room      string    `json:"room"`
	Serial    string    `json:"intensifier_serial"`
	Procedure string    `json:"procedure"`
	Records   int64     `json:"records"`
	State     string    `json:"state"` // complete, aborted, unfinished
	Simulated bool      `json:"simulated"`
}

// journalArg is the journal a command reads: its FILE argument or
// --journal, not both.
func journalArg(args []string, flag string, flagSet bool) (string, error) {
	switch {
	case len(args) == 1 && flagSet:
		return "", withCode(exitUsage, errors.New("give the journal as FILE or --journal FILE, not both"))
	case len(args) == 1:
		return args[0], nil
	}
	return flag, nil
}
