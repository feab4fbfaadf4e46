package engine

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"

	"kermalux/calib"
	"kermalux/drivers/filepos"
	"kermalux/procedures/entry"
)

// ResultsFile is the results.json contract for scripts and for the next
// session's baseline. Keep field names stable; add, never rename.
type ResultsFile struct {
	Session   string       `json:"session"`
	Site      string       `json:"site,omitempty"`
	Room      string       `json:"room,omitempty"`
	Model     string       `json:"intensifier_model,omitempty"`
	Serial    string       `json:"intensifier_serial,omitempty"`
	Procedure string       `json:"procedure,omitempty"`
	Outcome   string       `json:"outcome"`
	Results   []ResultLine `json:"results"`
	BeamOn    float64      `json:"beam_on_s"`
	// Simulated is true when the readings came from the bench simulator
	// (the demo): the figures are not measurements, and such a file is
	// refused as the baseline of a real bench.
	Simulated bool `json:"simulated"`
	// Note says so in words, for a person who opens the file.
	Note string `json:"note,omitempty"`
}

// SimulatedNote is what a simulated results file says of itself.
const SimulatedNote = "simulated session: the readings came from the bench simulator; these figures are not measurements"

// ResultLine is one figure of merit in results.json.
type ResultLine struct {
	Procedure  string   `json:"procedure"`
	FieldMode  string   `json:"field_mode"`
	Quantity   string   `json:"quantity"`
	Value      float64  `json:"value"`
	Unit       string   `json:"unit"`
	ExpUnc     float64  `json:"expanded_uncertainty"`
	K          float64  `json:"coverage_factor"`
	Verdict    string   `json:"verdict"`
	Calibrated bool     `json:"calibrated"`
	DecidedBy  string   `json:"decided_by,omitempty"`
	Baseline   float64  `json:"baseline,omitempty"`
	Flags      []string `json:"flags,omitempty"`
}

// NewResultsFile turns a run's summary into the results.json contract.
func NewResultsFile(s Summary, sess entry.Session) ResultsFile {
	rf := ResultsFile{
		Session: s.Session, Site: sess.Site, Room: sess.Room, Model: sess.IntensifierModel,
		Serial: sess.IntensifierSerial, Procedure: sess.Procedure, Outcome: s.Outcome,
		Results: []ResultLine{}, BeamOn: s.BeamOn.Seconds(), Simulated: sess.Simulated,
	}
	if sess.Simulated {
		rf.Note = SimulatedNote
	}
	for _, r := range s.Results {
		rf.Results = append(rf.Results, ResultLine{
			Procedure: r.Procedure, FieldMode: r.FieldMode, Quantity: r.Quantity,
			Value: r.Value, Unit: r.Unit, ExpUnc: r.ExpUnc, K: r.K, Verdict: r.Verdict,
			Calibrated: r.Calibrated, DecidedBy: r.DecidedBy, Baseline: r.Baseline, Flags: r.Flags,
		})
	}
	return rf
}

// WriteResults writes rf as indented JSON.
func WriteResults(w io.Writer, rf ResultsFile) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(rf)
}

// WriteResultsFile writes rf to dir/results.json, atomically (temp file,
// fsync, rename) so a power cut leaves either the old or the new file.
func WriteResultsFile(dir string, rf ResultsFile) (string, error) {
	path := filepath.Join(dir, "results.json")
	tmp, err := os.CreateTemp(dir, ".results-*.json")
	if err != nil {
		return "", fmt.Errorf("write results in %s: %w", dir, err)
	}
	defer os.Remove(tmp.Name())
	if err := WriteResults(tmp, rf); err != nil {
		tmp.Close()
		return "", fmt.Errorf("write %s: %w", path, err)
	}
	if err := tmp.Sync(); err != nil {
		tmp.Close()
		return "", fmt.Errorf("write %s: %w", path, err)
	}
	if err := tmp.Close(); err != nil {
		return "", fmt.Errorf("write %s: %w", path, err)
	}
	if err := os.Rename(tmp.Name(), path); err != nil {
		return "", fmt.Errorf("write %s: %w", path, err)
	}
	return path, nil
}

// MaxResultsBytes bounds a results.json read back (a baseline): one
// visit's results take a few kilobytes; a file far larger is no results
// file, and the board would spend its memory decoding it.
const MaxResultsBytes = 4 << 20

// ReadResults reads a results.json (a baseline), at most MaxResultsBytes.
func ReadResults(path string) (ResultsFile, error) {
	b, err := filepos.ReadFile(path, MaxResultsBytes, "results file")
	if err != nil {
		return ResultsFile{}, fmt.Errorf("read results: %w", err)
	}
	return ParseResults(path, b)
}

// ParseResults reads the text of a results.json; name is used in errors.
func ParseResults(name string, b []byte) (ResultsFile, error) {
	var rf ResultsFile
	if err := json.Unmarshal(b, &rf); err != nil {
		var se *json.SyntaxError
		if errors.As(err, &se) {
			line := 1 + bytes.Count(b[:min(int(se.Offset), len(b))], []byte("\n"))
			return rf, fmt.Errorf("results %s:%d: %w", name, line, err)
		}
		return rf, fmt.Errorf("results %s: %w", name, err)
	}
	for i, r := range rf.Results {
		if r.Quantity == "" {
			return rf, fmt.Errorf("results %s: result %d has no quantity", name, i+1)
		}
	}
	return rf, nil
}

// Baselines turns earlier results into Settings.Baseline keys
// ("conversion_factor@32cm", and "conversion_factor" for results without a mode).
func Baselines(rf ResultsFile) map[string]float64 {
	m := map[string]float64{}
	for _, r := range rf.Results {
		if r.Verdict == string(calib.NotMeasurable) {
			// No value: never a baseline (a zero would make every later
			// value "above baseline" and a baseline rule meaningless).
			continue
		}
		m[limitKey(r.Quantity, r.FieldMode)] = r.Value
	}
	return m
}

func limitKey(quantity, mode string) string {
	if mode == "" {
		return quantity
	}
	return quantity + "@" + mode
}

// RoundToUncertainty writes a value and its uncertainty the way
// JCGM 100:2008 asks (7.2.6: an uncertainty with at most two significant
// digits; the value rounded to the same decimal place): u is rounded to
// two significant digits first, so 0.0996 becomes "0.10", not "0.100".
// Both are in fixed notation, never with an exponent. Without an
// uncertainty (u ≤ 0, NaN or infinite) the value has four significant
// digits and unc is "".
func RoundToUncertainty(v, u float64) (value, unc string) {
	if !(u > 0) || math.IsInf(u, 0) {
		return FourDigits(v), ""
	}
	if place := tensPlace(u); place > 0 {
		// u ≥ 100: two significant digits end left of the decimal point.
		p := math.Pow10(place)
		return strconv.FormatFloat(math.Round(v/p)*p, 'f', 0, 64), strconv.FormatFloat(math.Round(u/p)*p, 'f', 0, 64)
	}
	d := decimalsFor(u)
	return strconv.FormatFloat(v, 'f', d, 64), strconv.FormatFloat(u, 'f', d, 64)
}

// tensPlace is the power of ten of u's second significant digit when
// that lies left of the units (u ≥ 100), else 0.
func tensPlace(u float64) int {
	s := strconv.FormatFloat(u, 'e', 1, 64)
	exp, err := strconv.Atoi(s[strings.IndexByte(s, 'e')+1:])
	if err != nil || exp < 2 {
		return 0
	}
	return exp - 1
}

// decimalsFor is the number of decimals that shows u rounded to two
// significant digits (0 for u ≥ 10; at most 12).
func decimalsFor(u float64) int {
	s := strconv.FormatFloat(u, 'e', 1, 64) // "d.de±XX", rounded to two digits
	exp, err := strconv.Atoi(s[strings.IndexByte(s, 'e')+1:])
	if err != nil {
		return 0
	}
	return min(max(1-exp, 0), 12)
}

// FourDigits writes v with four significant digits in fixed notation,
// keeping trailing zeros (they are significant): 0.03004, 120.0, 12350.
func FourDigits(v float64) string {
	if v == 0 || math.IsNaN(v) || math.IsInf(v, 0) {
		return strconv.FormatFloat(v, 'f', -1, 64)
	}
	s := strconv.FormatFloat(v, 'e', 3, 64)
	exp, err := strconv.Atoi(s[strings.IndexByte(s, 'e')+1:])
	if err != nil {
		return s
	}
	return strconv.FormatFloat(v, 'f', min(max(3-exp, 0), 15), 64)
}

// CoverageFactor writes k with two decimals, the same in every table.
func CoverageFactor(k float64) string { return strconv.FormatFloat(k, 'f', 2, 64) }

// CheckResultsDir makes sure results.json can be written into dir before
// a session starts: the folder exists, is a folder and takes a file. A
// session must not run its exposures only to find at the end that its
// results have nowhere to go.
func CheckResultsDir(dir string) error {
	st, err := os.Stat(dir)
	switch {
	case err != nil:
		return fmt.Errorf("results folder %s: %w (create it first)", dir, err)
	case !st.IsDir():
		return fmt.Errorf("results folder %s is not a folder", dir)
	}
	f, err := os.CreateTemp(dir, ".results-check-*")
	if err != nil {
		return fmt.Errorf("results folder %s cannot take a file: %w", dir, err)
	}
	name := f.Name()
	f.Close()
	if err := os.Remove(name); err != nil {
		return fmt.Errorf("results folder %s: %w", dir, err)
	}
	return nil
}
