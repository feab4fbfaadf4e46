package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"os/signal"
	"time"

	"github.com/spf13/cobra"

	"kermalux/drivers"
	"kermalux/drivers/clock"
	"kermalux/drivers/profile"
	"kermalux/drivers/scpi"
	"kermalux/drivers/serialline"
	"kermalux/drivers/units"
)

type readOptions struct {
	profile  string
	port     string
	scpi     bool
	name     string
	json     bool
	count    int
	duration time.Duration
	baud     int
	unit     string
	query    string
	quantity string
	init     []string
}

func init() {
	var o readOptions
	cmd := &cobra.Command{
		Use:   "read --port PATH (--profile FILE | --scpi)",
		Short: "Read one meter and print its readings",
		Long: `read opens one meter on a serial port, identifies it and prints its
readings: time, value in the canonical unit, status, and the line as the
meter sent it. Use it to try a new meter profile or to check a cable.

The meter is described by a profile file (see drivers/profile/FORMAT.md) or
speaks SCPI (--scpi: 19200 baud, LF, *IDN?, READ?, SYST:ERR?). Give the port
as its stable link (/dev/serial/by-id/...) so a re-plugged adapter is found
again. Lines that cannot be understood, wrong units, silences and a pulled
cable are reported on standard error and reading goes on.

Stops after --count readings (default 10), after --for, or on Ctrl-C.
Exit status: 0 no errors (over- and under-range readings are shown, not errors),
1 a meter or link error occurred, 2 wrong command line.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error { return runRead(cmd, o) },
	}
	f := cmd.Flags()
	f.StringVar(&o.profile, "profile", "", "meter profile file (YAML)")
	f.StringVar(&o.port, "port", "", "serial port: device path or /dev/serial/by-id link")
	f.BoolVar(&o.scpi, "scpi", false, "the meter speaks SCPI (instead of --profile)")
	f.StringVar(&o.name, "name", "meter", "role of the meter, copied into each reading (dosimeter, photometer)")
	f.BoolVar(&o.json, "json", false, "print one JSON object per reading")
	f.IntVar(&o.count, "count", 10, "stop after this many readings (0: no limit)")
	f.DurationVar(&o.duration, "for", 0, "stop after this long, such as 30s (0: no limit)")
	f.IntVar(&o.baud, "baud", 0, "SCPI: baud rate (default 19200)")
	f.StringVar(&o.unit, "unit", "", "SCPI: unit the readings are in, such as UGY/S (default: ask UNIT:KRAT?)")
	f.StringVar(&o.query, "query", "", "SCPI: reading query (default READ?)")
	f.StringSliceVar(&o.init, "init", nil, "SCPI: set-up commands sent after every (re)connection, comma-separated (default *RST,*CLS,CONF:KRAT)")
	f.StringVar(&o.quantity, "quantity", string(units.AirKermaRate), "SCPI: quantity measured: air_kerma_rate, air_kerma or luminance")
	register(cmd)
}

// meter is what read needs of a dialect.
type meter interface {
	drivers.Meter
	drivers.Identifier
}

func runRead(cmd *cobra.Command, o readOptions) error {
	switch {
	case o.port == "":
		return withCode(exitUsage, errors.New("read: give the meter's serial port with --port"))
	case (o.profile == "") == !o.scpi:
		return withCode(exitUsage, errors.New("read: give either --profile FILE or --scpi"))
	case o.count < 0 || o.duration < 0:
		return withCode(exitUsage, errors.New("read: --count and --for must not be negative"))
	}
	ctx, stop := signal.NotifyContext(cmd.Context(), os.Interrupt)
	defer stop()
	if o.duration > 0 {
		var cancel context.CancelFunc
		ctx, cancel = context.WithTimeout(ctx, o.duration)
		defer cancel()
	}
	clk := clock.NewReal()
	var m meter
	if o.scpi {
		cfg := scpi.Config{Line: serialline.Config{Baud: o.baud}, Unit: o.unit, Query: o.query, Quantity: units.Quantity(o.quantity), Init: o.init}
		sm, err := scpi.Open(ctx, o.port, cfg, scpi.WithName(o.name), scpi.WithClock(clk))
		if err != nil {
			return withCode(exitFailure, err)
		}
		m = sm
	} else {
		p, err := profile.Load(o.profile)
		if err != nil {
			return withCode(exitFailure, err)
		}
		pm, err := profile.Open(ctx, p, o.port, profile.Options{Name: o.name, Clock: clk})
		if err != nil {
			return withCode(exitFailure, err)
		}
		m = pm
	}
	defer m.Close()

	out, errOut := cmd.OutOrStdout(), cmd.ErrOrStderr()
	id, err := m.Identify(ctx)
	if err != nil {
		fmt.Fprintln(errOut, "read: identify:", err)
	} else if !o.json {
		fmt.Fprintf(out, "%s %s, serial %s, firmware %s on %s\n", id.Maker, id.Model, orDash(id.Serial), orDash(id.Firmware), o.port)
	}
	pr := newReadingPrinter(out, o.json)
	failed := err != nil
	for n := 0; o.count == 0 || n < o.count; {
		r, err := m.Read(ctx)
		if ctx.Err() != nil {
			break
		}
		if err != nil {
			failed = true
			fmt.Fprintln(errOut, "read:", err)
			if errors.Is(err, drivers.ErrLinkDown) {
				// Wait a little between reconnection attempts.
				if clk.Sleep(ctx, 500*time.Millisecond) != nil {
					break
				}
			}
			continue
		}
		pr.print(r)
		n++
	}
	if failed {
		return withCode(exitFailure, fmt.Errorf("read: the meter on %s reported errors (see above)", o.port))
	}
	return nil
}

func orDash(s string) string {
	if s == "" {
		return "-"
	}
	return s
}

type readingPrinter struct {
	json bool
	enc  *json.Encoder
	w    io.Writer
	head bool
}

func newReadingPrinter(w io.Writer, asJSON bool) *readingPrinter {
	if asJSON {
		return &readingPrinter{json: true, enc: json.NewEncoder(w)}
	}
	return &readingPrinter{w: w}
}

// readingJSON is the --json line; its names are this command's own.
type readingJSON struct {
	Time           time.Time `json:"time"`
	MonoSeconds    float64   `json:"mono_s"`
	Meter          string    `json:"meter"`
	Quantity       string    `json:"quantity"`
	Value          float64   `json:"value"`
	Unit           string    `json:"unit"`
	Status         string    `json:"status"`
	RawValue       float64   `json:"raw_value"`
	RawUnit        string    `json:"raw_unit"`
	Raw            string    `json:"raw"`
	AfterReconnect bool      `json:"after_reconnect,omitempty"`
}

func (p *readingPrinter) print(r drivers.Reading) {
	if p.json {
		p.enc.Encode(readingJSON{r.Wall, r.Mono.Seconds(), r.Meter, string(r.Quantity), r.Value, r.Unit, string(r.Status), r.RawValue, r.RawUnit, r.Raw, r.AfterReconnect})
		return
	}
	if !p.head {
		fmt.Fprintf(p.w, "%-12s  %12s  %-6s  %-11s  %s\n", "TIME", "VALUE", "UNIT", "STATUS", "RAW")
		p.head = true
	}
	note := ""
	if r.AfterReconnect {
		note = "  (first after reconnecting)"
	}
	fmt.Fprintf(p.w, "%-12s  %12.6g  %-6s  %-11s  %q%s\n", r.Wall.Format("15:04:05.000"), r.Value, r.Unit, r.Status, r.Raw, note)
}
