package report

import (
	"encoding/csv"
	"fmt"
	"io"
	"strconv"
	"strings"
	"time"

	"kermalux/procedures/entry"
)

// g writes v in full precision (the shortest decimal that reads back the
// same) in fixed notation: 0.0000054, never 5.4e-06.
func g(v float64) string { return strconv.FormatFloat(v, 'f', -1, 64) }

// WriteResultsCSV writes one row per result, for spreadsheets: numbers in
// full precision with a dot as decimal separator, times in RFC 3339.
func (r *Report) WriteResultsCSV(w io.Writer) error {
	cw := csv.NewWriter(w)
	r.stampCSV(cw)
	head := []string{"session", "site", "room", "intensifier_serial", "started", "step", "field_mode", "quantity", "value", "unit",
		"standard_uncertainty", "expanded_uncertainty", "coverage_factor", "verdict", "decided_by", "calibrated", "baseline", "baseline_fraction", "flags", "review", "limits", "simulated", "meter"}
	if err := cw.Write(head); err != nil {
		return fmt.Errorf("results CSV: %w", err)
	}
	s := r.Session
	for _, res := range r.Results {
		value, std, exp, k := g(res.Value), g(res.StdUnc), g(res.ExpUnc), g(res.K)
		if res.Unmeasured() {
			// No value, only the reason (decided_by).
			value, std, exp, k = "", "", "", ""
		}
		row := []string{s.ID, s.Site, s.Room, s.IntensifierSerial, s.Started.Format(time.RFC3339), strconv.Itoa(res.Step), res.FieldMode, res.Quantity,
			value, res.Unit, std, exp, k, res.Verdict, res.DecidedBy, strconv.FormatBool(res.Calibrated),
			optional(res.Baseline), optional(res.BaselineFrac), strings.Join(res.Flags, "; "), res.Review, limitsCSV(res.Limits), strconv.FormatBool(r.Simulated), res.Meter}
		if err := cw.Write(row); err != nil {
			return fmt.Errorf("results CSV: %w", err)
		}
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		return fmt.Errorf("results CSV: %w", err)
	}
	return nil
}

// WriteReadingsCSV writes one row per reading with its raw line, raw
// value, every correction in order and the corrected value.
func (r *Report) WriteReadingsCSV(w io.Writer) error {
	cw := csv.NewWriter(w)
	r.stampCSV(cw)
	head := []string{"session", "seq", "wall", "mono_ns", "boot_id", "step", "step_id", "field_mode", "position", "meter", "quantity",
		"raw", "raw_value", "raw_unit", "corrections", "value", "unit", "status", "used", "calibrated", "certificate", "flags", "simulated"}
	if err := cw.Write(head); err != nil {
		return fmt.Errorf("readings CSV: %w", err)
	}
	for _, rd := range r.Readings {
		var cs []string
		for _, c := range rd.Corrections {
			off := g(c.Offset)
			if c.Offset >= 0 {
				off = "+" + off
			}
			cs = append(cs, c.Name+"*"+g(c.Factor)+off)
		}
		row := []string{r.Session.ID, strconv.FormatInt(rd.Seq, 10), rd.Wall.Format(time.RFC3339Nano), strconv.FormatInt(int64(rd.Mono), 10), rd.BootID,
			strconv.Itoa(rd.Step), rd.StepID, rd.FieldMode, rd.Position, rd.Meter, rd.Quantity, rd.Raw, g(rd.RawValue), rd.RawUnit,
			strings.Join(cs, "; "), g(rd.Value), rd.Unit, rd.Status, strconv.FormatBool(rd.Used), strconv.FormatBool(rd.Calibrated), rd.Certificate,
			strings.Join(rd.Flags, "; "), strconv.FormatBool(r.Simulated)}
		if err := cw.Write(row); err != nil {
			return fmt.Errorf("readings CSV: %w", err)
		}
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		return fmt.Errorf("readings CSV: %w", err)
	}
	return nil
}

// WriteTrendCSV writes one row per session of each trend.
func WriteTrendCSV(w io.Writer, trends []Trend) error {
	cw := csv.NewWriter(w)
	if err := cw.Write([]string{"serial", "quantity", "field_mode", "session", "date", "site", "room", "value", "unit", "expanded_uncertainty", "coverage_factor", "baseline_fraction", "verdict", "simulated"}); err != nil {
		return fmt.Errorf("trend CSV: %w", err)
	}
	for _, t := range trends {
		for _, p := range t.Points {
			if err := cw.Write([]string{t.Serial, t.Quantity, t.FieldMode, p.Session, p.Date.Format(time.RFC3339), p.Site, p.Room, g(p.Value), t.Unit,
				g(p.ExpUnc), g(p.K), g(p.Fraction), p.Verdict, strconv.FormatBool(p.Simulated)}); err != nil {
				return fmt.Errorf("trend CSV: %w", err)
			}
		}
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		return fmt.Errorf("trend CSV: %w", err)
	}
	return nil
}

func optional(v float64) string {
	if v == 0 {
		return ""
	}
	return g(v)
}

// limitsCSV writes a result's limits as "kind bound value margin m",
// separated by "; " (bound: at_least or at_most; numbers in full
// precision, in the result's unit).
func limitsCSV(ls []entry.LimitCheck) string {
	var parts []string
	for _, l := range ls {
		parts = append(parts, fmt.Sprintf("%s %s %s margin %s", l.Kind, l.Bound, g(l.Value), g(l.Margin)))
	}
	return strings.Join(parts, "; ")
}

// stampCSV puts the NOT VERIFIED stamp, alone on the first line, before
// the header of a CSV from records that do not verify.
func (r *Report) stampCSV(cw *csv.Writer) {
	if t := r.UnverifiedText(); t != "" {
		_ = cw.Write([]string{t})
	}
}
