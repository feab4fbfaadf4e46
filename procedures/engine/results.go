package engine

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"

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
}

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
		Results: []ResultLine{}, BeamOn: s.BeamOn.Seconds(),
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

// ReadResults reads a results.json (a baseline).
func ReadResults(path string) (ResultsFile, error) {
	b, err := os.ReadFile(path)
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

// Baselines turns earlier results into Limits.Baseline keys
// ("conversion_factor@32cm", and "conversion_factor" for results without a mode).
func Baselines(rf ResultsFile) map[string]float64 {
	m := map[string]float64{}
	for _, r := range rf.Results {
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
