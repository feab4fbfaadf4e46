package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"log/slog"
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
	giveUp   time.Duration
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
again. Lines that cannot be understood, wrong units, silences, errors the
meter reports and a pulled cable are logged on standard error (one line
each, with its time, in the same clock as the readings) and reading goes on.
Over- and under-range readings are shown with no value.

Stops after --count readings (default 10), after --for, on Ctrl-C, or when
no reading has come for --give-up (default 30s: a meter gone for good or
one that never answers).
Exit status: 0 no errors (over- and under-range readings are not errors),
1 a meter or link error occurred, or the meter reported errors (an error-queue
entry, a fault status, SCPI's not-a-number), or it gave up, 2 wrong command line.`,
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
	f.DurationVar(&o.giveUp, "give-up", 30*time.Second, "stop when no reading has come for this long (0: never)")
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

// readLog is read's standard error: one text line per event, its time in
// the same form as the readings' (RFC 3339 with milliseconds).
func readLog(w io.Writer) *slog.Logger {
	return slog.New(slog.NewTextHandler(w, &slog.HandlerOptions{Level: slog.LevelInfo, ReplaceAttr: func(groups []string, a slog.Attr) slog.Attr {
		if a.Key == slog.TimeKey && len(groups) == 0 {
			return slog.String(slog.TimeKey, a.Value.Time().Format(readTime))
		}
		return a
	}}))
}

const readTime = "2006-01-02T15:04:05.000Z07:00"

func runRead(cmd *cobra.Command, o readOptions) error {
	switch {
	case o.port == "":
		return withCode(exitUsage, errors.New("read: give the meter's serial port with --port"))
	case (o.profile == "") == !o.scpi:
		return withCode(exitUsage, errors.New("read: give either --profile FILE or --scpi"))
	case o.count < 0 || o.duration < 0 || o.giveUp < 0:
		return withCode(exitUsage, errors.New("read: --count, --for and --give-up must not be negative"))
	}
	ctx, stop := signal.NotifyContext(cmd.Context(), os.Interrupt)
	defer stop()
	if o.duration > 0 {
		var cancel context.CancelFunc
		ctx, cancel = context.WithTimeout(ctx, o.duration)
		defer cancel()
	}
	out, errOut := cmd.OutOrStdout(), cmd.ErrOrStderr()
	log := readLog(errOut)
	fail := func(err error) error {
		log.Error("read failed", "port", o.port, "err", err)
		return withCodeLogged(exitFailure, err)
	}
	clk := clock.NewReal()
	var m meter
	if o.scpi {
		cfg := scpi.Config{Line: serialline.Config{Baud: o.baud}, Unit: o.unit, Query: o.query, Quantity: units.Quantity(o.quantity), Init: o.init}
		sm, err := scpi.Open(ctx, o.port, cfg, scpi.WithName(o.name), scpi.WithClock(clk), scpi.WithLogger(log))
		if err != nil {
			return fail(err)
		}
		m = sm
	} else {
		p, err := profile.Load(o.profile)
		if err != nil {
			return fail(err)
		}
		pm, err := profile.Open(ctx, p, o.port, profile.Options{Name: o.name, Clock: clk, Log: log})
		if err != nil {
			return fail(err)
		}
		m = pm
	}
	defer m.Close()

	id, err := m.Identify(ctx)
	if err != nil {
		log.Error("identify", "meter", o.name, "err", err)
	} else if !o.json {
		fmt.Fprintf(out, "%s %s, serial %s, firmware %s on %s\n", id.Maker, id.Model, orDash(id.Serial), orDash(id.Firmware), o.port)
	}
	pr := newReadingPrinter(out, o.json)
	failed := err != nil
	lastGood := clk.Mono()
	for n := 0; o.count == 0 || n < o.count; {
		r, err := m.Read(ctx)
		if ctx.Err() != nil {
			break
		}
		if err != nil {
			failed = true
			log.Error("meter error", "meter", o.name, "err", err)
			if o.giveUp > 0 && clk.Mono()-lastGood >= o.giveUp {
				log.Error("giving up", "meter", o.name, "port", o.port, "waited", (clk.Mono() - lastGood).Round(time.Millisecond).String(), "reason", "no reading in --give-up")
				return withCodeLogged(exitFailure, fmt.Errorf("read: no reading from %s for %v", o.port, o.giveUp))
			}
			if errors.Is(err, drivers.ErrLinkDown) {
				// Wait a little between reconnection attempts.
				if clk.Sleep(ctx, 500*time.Millisecond) != nil {
					break
				}
			}
			continue
		}
		lastGood = clk.Mono()
		if r.Status == drivers.StatusFault {
			failed = true
			log.Error("meter reports a fault", "meter", o.name, "raw", r.Raw)
		}
		pr.print(r)
		n++
	}
	if failed {
		err := fmt.Errorf("read: the meter on %s reported errors (see above)", o.port)
		log.Error("done with errors", "port", o.port, "err", err)
		return withCodeLogged(exitFailure, err)
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
	Value          *float64  `json:"value"` // null when the meter gave no number (over range, not a number)
	Unit           string    `json:"unit"`
	Status         string    `json:"status"`
	RawValue       float64   `json:"raw_value"`
	RawUnit        string    `json:"raw_unit"`
	Raw            string    `json:"raw"`
	AfterReconnect bool      `json:"after_reconnect,omitempty"`
}

func (p *readingPrinter) print(r drivers.Reading) {
	if p.json {
		var v *float64
		if !r.NoValue {
			v = &r.Value
		}
		p.enc.Encode(readingJSON{r.Wall, r.Mono.Seconds(), r.Meter, string(r.Quantity), v, r.Unit, string(r.Status), r.RawValue, r.RawUnit, r.Raw, r.AfterReconnect})
		return
	}
	if !p.head {
		fmt.Fprintf(p.w, "%-29s  %12s  %-6s  %-11s  %s\n", "TIME", "VALUE", "UNIT", "STATUS", "RAW")
		p.head = true
	}
	note := ""
	if r.AfterReconnect {
		note = "  (first after reconnecting)"
	}
	value := fmt.Sprintf("%12.6g", r.Value)
	if r.NoValue {
		value = fmt.Sprintf("%12s", "-")
	}
	fmt.Fprintf(p.w, "%-29s  %s  %-6s  %-11s  %q%s\n", r.Wall.Format(readTime), value, r.Unit, r.Status, r.Raw, note)
}
