package main

import (
	"fmt"
	"os"
	"path/filepath"
	"text/tabwriter"
	"time"

	"github.com/spf13/cobra"

	"kermalux/calib"
)

// certsOptions are the flags of `kermalux certs`.
type certsOptions struct {
	on string // day to judge validity on (YYYY-MM-DD), default today
}

func init() {
	var o certsOptions
	cmd := &cobra.Command{
		Use:   "certs FILE|DIR...",
		Short: "Check calibration certificates: in date, due within 30 days, or expired",
		Long: `Reads calibration certificate files (or every *.yaml in a directory) and
prints each meter's certificate with its due date and standing. Exits 1 when a
certificate does not parse or is out of date, so it can run before leaving for a site.`,
		Args: cobra.MinimumNArgs(1),
		RunE: func(c *cobra.Command, args []string) error { return runCerts(c, o, args) },
	}
	cmd.Flags().StringVar(&o.on, "on", "", "judge validity on this day (YYYY-MM-DD) instead of today")
	register(cmd)
}

func runCerts(c *cobra.Command, o certsOptions, args []string) error {
	day := time.Now()
	if o.on != "" {
		d, err := time.ParseInLocation("2006-01-02", o.on, time.Local)
		if err != nil {
			return withCode(exitUsage, fmt.Errorf("--on %q: want a date as YYYY-MM-DD", o.on))
		}
		day = d
	}
	var certs []*calib.Certificate
	var problems []error
	for _, a := range args {
		st, err := os.Stat(a)
		if err != nil {
			return withCode(exitUsage, err)
		}
		if st.IsDir() {
			cs, err := calib.LoadDir(a)
			certs = append(certs, cs...)
			if err != nil {
				problems = append(problems, err)
			}
			continue
		}
		cert, err := calib.LoadCertificate(a)
		if err != nil {
			problems = append(problems, err)
			continue
		}
		certs = append(certs, cert)
	}
	w := tabwriter.NewWriter(c.OutOrStdout(), 0, 4, 2, ' ', 0)
	fmt.Fprintln(w, "METER\tSERIAL\tCERTIFICATE\tDUE\tSTANDING\tFILE")
	bad := 0
	for _, cert := range certs {
		v := cert.ValidOn(day)
		standing := "valid"
		switch {
		case !v.Valid && superseded(certs, cert, day):
			standing = "out of date, superseded"
		case !v.Valid:
			standing = "OUT OF DATE"
			bad++
		case v.DueSoon:
			standing = fmt.Sprintf("due in %d days", v.DaysLeft)
		}
		fmt.Fprintf(w, "%s\t%s\t%s\t%s\t%s\t%s\n", cert.Model, cert.Serial, cert.Number,
			cert.Due.Format("2006-01-02"), standing, filepath.Base(cert.File))
	}
	w.Flush()
	for _, p := range problems {
		fmt.Fprintln(c.ErrOrStderr(), p)
	}
	if len(problems) > 0 || bad > 0 {
		return withCode(exitFailure, fmt.Errorf("%d certificate(s) out of date, %d file(s) not readable", bad, len(problems)))
	}
	return nil
}

// superseded reports whether another certificate of the same meter is the
// one in use on day (so an old, expired certificate is history, not a problem).
func superseded(certs []*calib.Certificate, cert *calib.Certificate, day time.Time) bool {
	p := calib.Pick(certs, cert.Serial, day)
	return p != nil && p != cert && p.ValidOn(day).Valid
}
