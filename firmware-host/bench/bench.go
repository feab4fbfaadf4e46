// Package bench reads the bench file: which site, room and intensifier a
// session is for, which meters sit where (port, dialect, certificate), the
// chamber's geometry, the panel, the journal, the sequence to run, the
// defaults of entered values and the local limits. It also opens the
// meters it names. The format is documented in FORMAT.md.
package bench

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"time"

	"github.com/goccy/go-yaml"
	"periph.io/x/conn/v3/i2c"

	"kermalux/calib"
	"kermalux/drivers"
	"kermalux/drivers/clock"
	"kermalux/drivers/profile"
	"kermalux/drivers/scpi"
	"kermalux/drivers/serialline"
	"kermalux/drivers/units"
	"kermalux/firmware-host/panel/compose"
	"kermalux/procedures/catalog"
)

// Bench is a parsed bench file.
type Bench struct {
	Site        string      `yaml:"site"`
	Room        string      `yaml:"room"`
	Engineer    string      `yaml:"engineer"`
	Intensifier Intensifier `yaml:"intensifier"`
	// TestType is why the test is made: acceptance, yearly or after repair.
	TestType string `yaml:"test_type"`
	// XRay is the fluoroscopy system the intensifier belongs to.
	XRay     XRaySystem     `yaml:"xray_system"`
	Meters   []Meter        `yaml:"meters"`
	Chamber  Chamber        `yaml:"chamber"`
	Panel    compose.Config `yaml:"panel"`
	Journal  string         `yaml:"journal"`
	Keys     string         `yaml:"keys"` // directory of the board's signing key
	Sequence string         `yaml:"sequence"`
	Defaults Defaults       `yaml:"defaults"`
	Limits   LocalLimits    `yaml:"limits"`
	// Language is the engineer's language: what the board says and shows,
	// and the report (a code of procedures/catalog: en, de, fr; empty:
	// English).
	Language string `yaml:"language"`
	// Catalogs are the site's own catalog files (relative to the bench
	// file), translating its own procedures' texts into Language.
	Catalogs []string `yaml:"catalogs"`
	// RoomAir is the room-air sensor on the board's I2C bus (optional).
	RoomAir *RoomAir `yaml:"room_air"`
	// OpenI2C, when set, opens the room-air sensor's bus instead of
	// periph's host drivers (the demo's simulated chip).
	OpenI2C func(bus string) (i2c.BusCloser, error) `yaml:"-"`

	// Path is the file the bench was read from; SHA256 its hex digest
	// (journalled with each session).
	Path   string `yaml:"-"`
	SHA256 string `yaml:"-"`
	// dir is the absolute folder of Path at load time: every relative path
	// in the file is resolved against it, whatever the current directory
	// is then or later.
	dir string
	// Simulated is set by the demo, whose meters are the bench simulator:
	// its sessions and results are marked simulated, and only such a
	// bench accepts a simulated results.json as its baseline.
	Simulated bool `yaml:"-"`
	// messages is the catalog of Language, loaded by check.
	messages *catalog.Catalog
}

// Messages is the catalog of the bench's language (nil for English).
func (b *Bench) Messages() *catalog.Catalog { return b.messages }

// XRaySystem names the X-ray system, its generator and its tube.
type XRaySystem struct {
	Model           string `yaml:"model"`
	Serial          string `yaml:"serial"`
	Generator       string `yaml:"generator"`
	GeneratorSerial string `yaml:"generator_serial"`
	Tube            string `yaml:"tube"`
	TubeSerial      string `yaml:"tube_serial"`
}

// TestTypes are the reasons for a test a bench file may give.
var TestTypes = []string{"acceptance", "yearly", "after repair"}

// Intensifier is the tube under test.
type Intensifier struct {
	Model      string             `yaml:"model"`
	Serial     string             `yaml:"serial"`
	FieldModes []FieldMode        `yaml:"field_modes"`
	Spec       map[string]float64 `yaml:"spec"`     // e.g. conversion_factor_min, contrast_ratio_min, non_uniformity_max (per mode: conversion_factor_min@17cm)
	Baseline   string             `yaml:"baseline"` // a previous session's results.json, relative to the bench file
}

// FieldMode is one input field size.
type FieldMode struct {
	Name       string  `yaml:"name"`
	DiameterMM float64 `yaml:"diameter_mm"`
}

// Meter is one meter on the bench.
type Meter struct {
	Name        string       `yaml:"name"`
	Role        string       `yaml:"role"` // dosimeter or photometer
	Port        string       `yaml:"port"` // device path or /dev/serial/by-id name
	Profile     string       `yaml:"profile"`
	SCPI        *SCPIDialect `yaml:"scpi"`
	Certificate string       `yaml:"certificate"`
}

// SCPIDialect configures an SCPI meter.
type SCPIDialect struct {
	Baud     int      `yaml:"baud"`
	Init     []string `yaml:"init"`
	Query    string   `yaml:"query"`
	Unit     string   `yaml:"unit"`
	Quantity string   `yaml:"quantity"`
}

// Chamber is where the ionisation chamber sits. Distances from the focal
// spot in mm; 0 means "at the input plane".
type Chamber struct {
	SourceToChamberMM float64 `yaml:"source_to_chamber_mm"`
	SourceToInputMM   float64 `yaml:"source_to_input_mm"`
	AgainstFace       bool    `yaml:"against_face"`
	Backscatter       float64 `yaml:"backscatter"`
	GridRemoved       bool    `yaml:"grid_removed"`
}

// Defaults for entered values.
type Defaults struct {
	TemperatureC float64 `yaml:"temperature_c"`
	PressureKPa  float64 `yaml:"pressure_kpa"`
	TubeVoltage  float64 `yaml:"tube_voltage_kv"`
	TubeCurrent  float64 `yaml:"tube_current_ma"`
	// LeadDiskDiameter is the diameter of the bench's lead disk for the
	// contrast ratio, in mm.
	LeadDiskDiameter float64 `yaml:"lead_disk_diameter_mm"`
	// Standard uncertainties of the room thermometer (°C) and barometer
	// (kPa), for the k_TP row of the budget. Zero: 0.29 °C and 0.12 kPa,
	// a thermometer good to ±0.5 °C and a barometer to ±0.2 kPa read as
	// rectangular distributions, u = a/√3 (JCGM 100:2008 4.3.7; the
	// instrument accuracies are common practice: state yours).
	TemperatureUncC float64 `yaml:"temperature_uncertainty_c"`
	PressureUncKPa  float64 `yaml:"pressure_uncertainty_kpa"`
}

// LocalLimits are the site's own settings.
type LocalLimits struct {
	Action           map[string]float64 `yaml:"action"` // e.g. conversion_factor_min: 100
	BaselineFraction float64            `yaml:"baseline_fraction"`
	KermaCeiling     float64            `yaml:"kerma_ceiling_ugy_s"`
	Precision        float64            `yaml:"precision"` // relative expanded uncertainty target, e.g. 0.02
}

// Load reads and checks a bench file (at most MaxFileSize bytes).
func Load(path string) (*Bench, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("bench file: %w", err)
	}
	defer f.Close()
	data, err := io.ReadAll(io.LimitReader(f, MaxFileSize+1))
	if err != nil {
		return nil, fmt.Errorf("bench file %s: %w", path, err)
	}
	b, err := Parse(path, data)
	if err != nil {
		return nil, err
	}
	b.Path = path
	return b, nil
}

// Parse reads a bench file's text; name is used in errors.
func Parse(name string, data []byte) (bench *Bench, err error) {
	var b Bench
	if len(data) > MaxFileSize {
		return nil, fmt.Errorf("bench file %s: larger than %d KiB: not a bench file", name, MaxFileSize>>10)
	}
	defer func() {
		// The YAML decoder panics on some malformed input (found by
		// fuzzing): report it as a malformed file.
		if r := recover(); r != nil {
			bench, err = nil, fmt.Errorf("bench file %s: malformed YAML (%v)", name, r)
		}
	}()
	if err := yaml.UnmarshalWithOptions(data, &b, yaml.Strict()); err != nil {
		return nil, fmt.Errorf("bench file %s:%s", name, yamlPosition(yaml.FormatError(err, false, true)))
	}
	b.SHA256 = sha256Hex(data)
	b.Path = name
	if d, err := filepath.Abs(filepath.Dir(name)); err == nil {
		b.dir = d
	}
	if err := b.check(newChecker(name, data)); err != nil {
		return nil, err
	}
	return &b, nil
}

// Rel resolves a path written in the bench file relative to the file's
// folder (never the current directory).
func (b *Bench) Rel(p string) string {
	switch {
	case p == "" || filepath.IsAbs(p):
		return p
	case b.dir != "":
		return filepath.Join(b.dir, p)
	case b.Path != "":
		return filepath.Join(filepath.Dir(b.Path), p)
	}
	return p
}

// KeyDir is the directory of the board's signing key the file names
// (keys:), resolved against the file's folder; "" leaves the journal's
// default (board-key/ beside the journal).
func (b *Bench) KeyDir() string { return b.Rel(b.Keys) }

// Quantity is what a meter role measures.
func Quantity(role string) units.Quantity {
	if role == "photometer" {
		return units.Luminance
	}
	return units.AirKermaRate
}

// OpenMeters opens every meter the bench names, keyed by role. ports
// overrides the port of a meter by name (the demo simulator's links are
// known only at run time). On an error the meters already opened are
// closed.
func OpenMeters(ctx context.Context, b *Bench, clk clock.Clock, ports map[string]string) (map[string]drivers.Meter, error) {
	out := map[string]drivers.Meter{}
	closeAll := func() {
		for _, m := range out {
			m.Close()
		}
	}
	for _, m := range b.Meters {
		port := m.Port
		if p, ok := ports[m.Name]; ok {
			port = p
		}
		if port == "" {
			closeAll()
			return nil, fmt.Errorf("bench %s: meter %s has no port", b.Path, m.Name)
		}
		var meter drivers.Meter
		var err error
		if m.Profile != "" {
			var p *profile.Profile
			p, err = profile.Load(b.Rel(m.Profile))
			if err == nil {
				meter, err = profile.Open(ctx, p, port, profile.Options{Name: m.Name, Clock: clk, Background: true})
			}
		} else {
			cfg := scpi.Config{Query: m.SCPI.Query, Unit: m.SCPI.Unit, Init: m.SCPI.Init, Quantity: units.Quantity(m.SCPI.Quantity)}
			cfg.Line = serialline.Config{Baud: m.SCPI.Baud}
			meter, err = scpi.Open(ctx, port, cfg, scpi.WithName(m.Name), scpi.WithClock(clk))
		}
		if err != nil {
			closeAll()
			return nil, fmt.Errorf("bench %s: open %s on %s: %w", b.Path, m.Name, port, err)
		}
		out[m.Role] = meter
	}
	return out, nil
}

// Certificates loads the meters' certificates by role; a meter without
// one is absent from the map. problems lists what to say aloud at the
// start: missing, expired or soon-due certificates.
func Certificates(b *Bench, day time.Time) (certs map[string]*calib.Certificate, problems []string, err error) {
	certs = map[string]*calib.Certificate{}
	for _, m := range b.Meters {
		if m.Certificate == "" {
			problems = append(problems, fmt.Sprintf("The %s has no calibration certificate.", m.Role))
			continue
		}
		c, err := calib.LoadCertificate(b.Rel(m.Certificate))
		if err != nil {
			return nil, nil, fmt.Errorf("bench %s: meter %s: %w", b.Path, m.Name, err)
		}
		certs[m.Role] = c
		if day.After(c.Due) {
			problems = append(problems, fmt.Sprintf("The %s certificate %s expired on %s.", m.Role, c.Number, c.Due.Format("2 January 2006")))
		} else if c.Due.Sub(day) < 30*24*time.Hour {
			problems = append(problems, fmt.Sprintf("The %s certificate %s is due on %s.", m.Role, c.Number, c.Due.Format("2 January 2006")))
		}
	}
	return certs, problems, nil
}

// Geometry is the chamber's position for calib's corrections.
func (b *Bench) Geometry() calib.Geometry {
	c := b.Chamber
	return calib.Geometry{SourceToChamber: c.SourceToChamberMM, SourceToInput: c.SourceToInputMM, OnFace: c.AgainstFace, Backscatter: c.Backscatter, GridRemoved: c.GridRemoved}
}

// Values are the defaults for entered values, by name.
func (b *Bench) Values() map[string]float64 {
	v := map[string]float64{}
	set := func(k string, x float64) {
		if x != 0 {
			v[k] = x
		}
	}
	set("temperature", b.Defaults.TemperatureC)
	set("pressure", b.Defaults.PressureKPa)
	set("tube_voltage", b.Defaults.TubeVoltage)
	set("tube_current", b.Defaults.TubeCurrent)
	set("lead_disk_diameter", b.Defaults.LeadDiskDiameter)
	return v
}

// ModeNames lists the field modes' names.
func (b *Bench) ModeNames() []string {
	var out []string
	for _, f := range b.Intensifier.FieldModes {
		out = append(out, f.Name)
	}
	return out
}

func sha256Hex(data []byte) string {
	sum := sha256.Sum256(data)
	return hex.EncodeToString(sum[:])
}

// yamlPosition turns the YAML library's "[line:col] message" into
// "line:col: message", so the error reads file:line:col: message.
func yamlPosition(msg string) string {
	if strings.HasPrefix(msg, "[") {
		if i := strings.Index(msg, "] "); i > 0 {
			return msg[1:i] + ": " + msg[i+2:]
		}
	}
	return " " + msg
}
