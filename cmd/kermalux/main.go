// Command kermalux leads an engineer hands-free through the acceptance and
// yearly check of an X-ray image intensifier, and keeps the records.
//
// Each subcommand lives in its own file (cmd_<name>.go) and registers
// itself with register in an init function; this file only maps errors to
// exit codes. Subcommands hold no logic of their own: they wire packages.
package main

import (
	"errors"
	"fmt"
	"io"
	"log/slog"
	"os"
	"runtime/debug"
	"strings"
	"sync"

	"github.com/spf13/cobra"
)

// version is set at build time with -ldflags "-X main.version=...".
var version = "0.1.0-dev"

var root = &cobra.Command{
	Use:   "kermalux",
	Short: "Guided, hands-free acceptance and yearly checks of X-ray image intensifiers",
	Long: `kermalux leads the engineer through the acceptance or yearly check of an
X-ray image intensifier: it speaks each step, waits for the foot switch, detects
the beam from the dosimeter, takes the readings as soon as they are precise
enough, applies the meters' calibration, computes the conversion factor,
luminance uniformity and contrast ratio with their uncertainties, judges them,
and journals every reading.

CAUTION: X-rays are dangerous. kermalux does not replace the judgement of a
qualified medical physicist or radiation safety officer, nor local regulations.`,
	SilenceUsage:  true,
	SilenceErrors: true,
	Version:       versionLine(),
}

func init() {
	root.SetVersionTemplate("kermalux {{.Version}}\n")
}

// versionLine is what --version prints: the version, the build flavour
// (board or workstation, from the board build tag), and the commit and
// its time as the Go toolchain recorded them (runtime/debug.ReadBuildInfo;
// "+changes" when the tree had uncommitted changes).
func versionLine() string {
	s := version + " (" + buildFlavour
	if bi, ok := debug.ReadBuildInfo(); ok {
		set := map[string]string{}
		for _, kv := range bi.Settings {
			set[kv.Key] = kv.Value
		}
		if rev := set["vcs.revision"]; rev != "" {
			if len(rev) > 12 {
				rev = rev[:12]
			}
			s += ", commit " + rev
			if set["vcs.modified"] == "true" {
				s += "+changes"
			}
			if t := set["vcs.time"]; t != "" {
				s += " of " + t
			}
		} else {
			s += ", commit unknown"
		}
		s += ", " + bi.GoVersion
		if arch := set["GOARCH"]; arch != "" {
			s += " " + set["GOOS"] + "/" + arch
			if arm := set["GOARM"]; arm != "" {
				s += "v" + arm
			}
		}
	}
	return s + ")"
}

// register adds a subcommand; each cmd_<name>.go calls it from init.
func register(cmds ...*cobra.Command) { root.AddCommand(cmds...) }

// exitError carries an exit code chosen by a subcommand.
type exitError struct {
	code   int
	err    error
	logged bool // already written to standard error
}

func (e *exitError) Error() string { return e.err.Error() }
func (e *exitError) Unwrap() error { return e.err }

// withCode marks err so that main exits with code.
func withCode(code int, err error) error { return &exitError{code: code, err: err} }

// withCodeLogged is withCode for an error the subcommand has already
// written to standard error in its own log format: it is not printed again.
func withCodeLogged(code int, err error) error { return &exitError{code: code, err: err, logged: true} }

// Exit codes, in one place.
const (
	exitOK      = 0
	exitFailure = 1 // the job failed or the input is invalid
	exitUsage   = 2 // the command line is wrong
)

func main() {
	slog.SetDefault(slog.New(slog.NewTextHandler(os.Stderr, &slog.HandlerOptions{Level: slog.LevelWarn})))
	os.Exit(execute(os.Args[1:], os.Stdout, os.Stderr))
}

// execute runs the command line args and returns the exit code.
func execute(args []string, stdout, stderr io.Writer) int {
	root.SetFlagErrorFunc(func(c *cobra.Command, err error) error { return withCode(exitUsage, err) })
	completionOnce.Do(wireCompletion)
	root.SetArgs(args)
	root.SetOut(stdout)
	root.SetErr(stderr)
	err := root.Execute()
	if err == nil {
		return exitOK
	}
	if missing := missingArgument(args, err); missing != "" {
		err = withCode(exitUsage, errors.New(missing))
	}
	var ee *exitError
	if errors.As(err, &ee) {
		if !ee.logged {
			fmt.Fprintln(stderr, "kermalux:", err)
		}
		return ee.code
	}
	fmt.Fprintln(stderr, "kermalux:", err)
	if isUsage(err) {
		return exitUsage
	}
	return exitFailure
}

var completionOnce sync.Once

// missingArgument turns cobra's bare "accepts 1 arg(s), received 0" or
// "requires at least 1 arg(s)" into a message that says which command
// wanted what, from its usage line; "" for any other error.
func missingArgument(args []string, err error) string {
	msg := err.Error()
	if !strings.Contains(msg, "received 0") && !strings.HasPrefix(msg, "requires at least") {
		return ""
	}
	c, _, ferr := root.Find(args)
	if ferr != nil || c == nil {
		return ""
	}
	want := strings.TrimSpace(strings.TrimPrefix(c.Use, c.Name()))
	if want == "" {
		want = "an argument"
	}
	return fmt.Sprintf("%s: missing argument: %s (usage: %s; kermalux help %s)", c.CommandPath(), want, c.UseLine(), strings.TrimPrefix(c.CommandPath(), "kermalux "))
}

// isUsage recognises cobra's own argument errors.
func isUsage(err error) bool {
	msg := err.Error()
	for _, p := range []string{"unknown command", "unknown flag", "accepts ", "requires at least", "requires at most", "required flag"} {
		if strings.Contains(msg, p) {
			return true
		}
	}
	return false
}
