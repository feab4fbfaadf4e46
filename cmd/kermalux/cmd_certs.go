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
	on     string // day to judge validity on (YYYY-MM-DD), default today
	asJSON bool
}

// certJSON is one certificate in `certs --json`.
type certJSON struct {
	Model      string    `json:"model"`
	Serial     string    `json:"serial"`
	Number     string    `json:"certificate"`
	Laboratory string    `json:"laboratory"`
	Calibrated time.Time `json:"calibrated"`
	Due        time.Time `json:"due"`
	Standing   string    `json:"standing"` // valid, due soon, out of date, superseded
	DaysLeft   int       `json:"days_left"`
	File       string    `json:"file"`
	OutOfDate  bool      `json:"out_of_date"`
	Superseded bool      `json:"superseded,omitempty"`
}

// certsJSON is `certs --json`: the certificates and the files that could
// not be read, each with its message.
type certsJSON struct {
	Day          string     `json:"day"`
	Certificates []certJSON `json:"certificates"`
	Problems     []string   `json:"problems"`
}

func init() {
	var o certsOptions
	cmd := &cobra.Command{
		Use:   "certs FILE|DIR...",
		Short: "Check calibration certificates: in date, due within 30 days, or expired",
		Long: `Reads calibration certificate files (or every *.yaml in a directory) and
prints each meter's certificate with its due date and standing. Exits 1 when a
certificate does not parse or is out of date, so it can run before leaving for a site.`,
		Args: func(c *cobra.Command, args []string) error {
			if len(args) == 0 {
				return withCode(exitUsage, fmt.Errorf("certs: missing the certificate FILE or DIR to check, e.g. kermalux certs testdata/certificates"))
			}
			return nil
		},
		RunE: func(c *cobra.Command, args []string) error { return runCerts(c, o, args) },
	}
	cmd.Flags().StringVar(&o.on, "on", "", "judge validity on this day (YYYY-MM-DD) instead of today")
	cmd.Flags().BoolVar(&o.asJSON, "json", false, "print the certificates and problems as one JSON document")
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
	if !o.asJSON {
		fmt.Fprintln(w, "METER\tSERIAL\tCERTIFICATE\tDUE\tSTANDING\tFILE")
	}
	doc := certsJSON{Day: day.Format("2006-01-02"), Certificates: []certJSON{}, Problems: []string{}}
	bad := 0
	for _, cert := range certs {
		v := cert.ValidOn(day)
		standing := "valid"
		cj := certJSON{Model: cert.Model, Serial: cert.Serial, Number: cert.Number, Laboratory: cert.Laboratory,
			Calibrated: cert.Calibrated, Due: cert.Due, DaysLeft: v.DaysLeft, File: cert.File, Standing: "valid"}
		switch {
		case !v.Valid && superseded(certs, cert, day):
			standing, cj.Standing, cj.OutOfDate, cj.Superseded = "out of date, superseded", "superseded", true, true
		case !v.Valid:
			standing, cj.Standing, cj.OutOfDate = "OUT OF DATE", "out of date", true
			bad++
		case v.DueSoon:
			standing, cj.Standing = fmt.Sprintf("due in %d days", v.DaysLeft), "due soon"
		}
		doc.Certificates = append(doc.Certificates, cj)
		if !o.asJSON {
			fmt.Fprintf(w, "%s\t%s\t%s\t%s\t%s\t%s\n", cert.Model, cert.Serial, cert.Number,
				cert.Due.Format("2006-01-02"), standing, filepath.Base(cert.File))
		}
	}
	w.Flush()
	for _, p := range problems {
		doc.Problems = append(doc.Problems, p.Error())
		if !o.asJSON {
			fmt.Fprintln(c.ErrOrStderr(), p)
		}
	}
	if o.asJSON {
		if err := writeJSON(c.OutOrStdout(), doc); err != nil {
			return err
		}
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
