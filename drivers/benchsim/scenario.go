package benchsim

import (
	"errors"
	"fmt"
	"math"
	"reflect"
	"strings"
	"time"

	"github.com/goccy/go-yaml"
	"github.com/goccy/go-yaml/ast"
	"github.com/goccy/go-yaml/parser"

	"kermalux/drivers/filepos"
)

// Scenario is one simulated bench: the intensifier, the meters on it and
// the faults to inject. Its YAML form is described in SCENARIO.md.
// Durations are written like "0.3s" or "250ms".
type Scenario struct {
	Seed        int64       `yaml:"seed"`
	Speed       float64     `yaml:"speed"` // demo clock speed, × real time
	Site        string      `yaml:"site"`
	Room        string      `yaml:"room"`
	Note        string      `yaml:"note"`
	Intensifier Intensifier `yaml:"intensifier"`
	Dosimeter   MeterSpec   `yaml:"dosimeter"`
	Photometer  MeterSpec   `yaml:"photometer"`
	Faults      []FaultSpec `yaml:"faults"`
	// Air is the room's air, which a vented ionisation chamber's reading
	// depends on (optional: without it the chamber reads as at its
	// reference conditions).
	Air *AirSpec `yaml:"room_air"`

	// Source is the file the scenario was read from (for error messages).
	Source string `yaml:"-"`
}

// Intensifier describes the fluoroscope and its image intensifier.
type Intensifier struct {
	Maker  string `yaml:"maker"`
	Model  string `yaml:"model"`
	Serial string `yaml:"serial"`
	// TubeVoltageKV is the tube voltage at start and the reference voltage
	// at which the field modes' kerma rates are given (default 70 kV).
	TubeVoltageKV float64 `yaml:"tube_voltage_kv"`
	// KVExponent: without automatic brightness control the input kerma
	// rate scales as (kV / reference kV)^KVExponent (default 2).
	KVExponent float64     `yaml:"kv_exponent"`
	FieldModes []FieldMode `yaml:"field_modes"`
	// StartMode is the field mode selected at start (default: the first).
	StartMode  string     `yaml:"start_mode"`
	Vignetting Vignetting `yaml:"vignetting"`
	// ContrastRatio is the true contrast ratio of the beam-induced light:
	// centre luminance with the input open over that with the lead disk.
	ContrastRatio float64 `yaml:"contrast_ratio"`
	// LeadDiskRadius is the output-image radius (fraction of the output
	// radius) inside which the lead disk's shadow lies (default 0.05).
	LeadDiskRadius float64 `yaml:"lead_disk_radius"`
	// DarkLuminance is the output luminance with the beam off, cd/m².
	DarkLuminance float64 `yaml:"dark_luminance"`
	// PhantomTransmission multiplies the input kerma rate with the phantom
	// in place when the brightness control is off (default 1).
	PhantomTransmission float64          `yaml:"phantom_transmission"`
	Brightness          BrightnessSpec   `yaml:"brightness_control"`
	Pulsed              *PulsedSpec      `yaml:"pulsed"`
	QuantumNoise        QuantumNoiseSpec `yaml:"quantum_noise"`
}

// FieldMode is one input field size. ConversionFactor and KermaRate may be
// left out for all but the first (largest) mode: they then follow the
// usual scaling with the diameter, G ∝ d² and K̇ ∝ 1/d² (common practice).
type FieldMode struct {
	Name       string  `yaml:"name"`
	DiameterCM float64 `yaml:"diameter_cm"`
	// ConversionFactor G, cd·m⁻² per µGy·s⁻¹.
	ConversionFactor float64 `yaml:"conversion_factor"`
	// KermaRate at the input plane, µGy/s, at the reference tube voltage.
	KermaRate float64 `yaml:"kerma_rate"`
}

// Vignetting is the radial fall-off of output luminance:
//
//	L(r, θ) = L0 · (1 − a · r² · (1 + b · cos(θ − θ0)))
//
// with r the fraction of the output radius, a = EdgeFalloff, b = Asymmetry
// and θ0 = AsymmetryAngleDeg.
type Vignetting struct {
	EdgeFalloff       float64 `yaml:"edge_falloff"`
	Asymmetry         float64 `yaml:"asymmetry"`
	AsymmetryAngleDeg float64 `yaml:"asymmetry_angle_deg"`
}

// BrightnessSpec is the automatic brightness control. When on, the input
// kerma rate is held at the field mode's value whatever the tube voltage
// or phantom; after beam-on or a change it settles from StartFraction of
// its target with the time constant TimeConstant.
type BrightnessSpec struct {
	On            bool          `yaml:"on"`
	TimeConstant  time.Duration `yaml:"time_constant"`
	StartFraction float64       `yaml:"start_fraction"`
}

// PulsedSpec is pulsed fluoroscopy: the tube fires Width-long pulses at
// RateHz; the mean kerma rate and luminance are those of the field mode.
type PulsedSpec struct {
	RateHz float64       `yaml:"rate_hz"`
	Width  time.Duration `yaml:"width"`
}

// QuantumNoiseSpec is the relative standard deviation of the kerma rate
// averaged over Over at the kerma rate AtKermaRate; it scales as
// 1/sqrt(rate · integration time), like counting statistics.
type QuantumNoiseSpec struct {
	Relative    float64       `yaml:"relative"`
	AtKermaRate float64       `yaml:"at_kerma_rate"`
	Over        time.Duration `yaml:"over"`
}

// MeterSpec is one simulated meter.
type MeterSpec struct {
	// Protocol: "veltrane-kr40" or "ondrakel-dx2" (dosimeter), "vessoric-lm9"
	// (photometer). The wire protocols are in SCENARIO.md.
	Protocol string `yaml:"protocol"`
	Serial   string `yaml:"serial"`
	Firmware string `yaml:"firmware"`
	// LinkName is the name of the stable link under <dir>/by-id
	// (default: maker-serial, e.g. "veltrane-KR40-1187").
	LinkName string `yaml:"link_name"`
	// Noise is the meter's relative noise (1 standard deviation) per
	// reading; NoiseFloor an absolute noise in the canonical unit.
	Noise      float64 `yaml:"noise"`
	NoiseFloor float64 `yaml:"noise_floor"`
	// CalibrationError: the meter reads true × (1 + CalibrationError).
	CalibrationError float64 `yaml:"calibration_error"`
	// Range of values the meter can show, canonical unit.
	Range RangeSpec `yaml:"range"`
	// ResponseTime is the time constant of the meter's first-order lag.
	ResponseTime time.Duration `yaml:"response_time"`
	// IntegrationTime over which a reading averages the quantum noise
	// (default: ResponseTime).
	IntegrationTime time.Duration `yaml:"integration_time"`
	// Unit the meter prints at start (KR-40: uGy/s, mR/s, mR/min; DX-2:
	// UGY/S, MR/S, MR/MIN; LM-9: cd/m2 or fL).
	Unit string `yaml:"unit"`
	// MaxRateHz is the fastest stream rate the meter accepts (LM-9: 50).
	MaxRateHz float64      `yaml:"max_rate_hz"`
	Chamber   *ChamberSpec `yaml:"chamber"`
	// Position of the photometer on the output face at start.
	Position *PositionSpec `yaml:"position"`
}

// AirSpec is the room's air temperature (°C) and pressure (kPa).
type AirSpec struct {
	TemperatureC float64 `yaml:"temperature_c"`
	PressureKPa  float64 `yaml:"pressure_kpa"`
}

// VentedSpec is a vented chamber's reference air conditions (those of its
// calibration certificate).
type VentedSpec struct {
	ReferenceTemperatureC float64 `yaml:"reference_temperature_c"`
	ReferencePressureKPa  float64 `yaml:"reference_pressure_kpa"`
}

// RangeSpec is a meter's display range.
type RangeSpec struct {
	Min float64 `yaml:"min"`
	Max float64 `yaml:"max"`
}

// ChamberSpec places the dosimeter's chamber: the kerma rate it sees is the
// input-plane rate × (InputFromFocus / ChamberFromFocus)² (inverse square
// law), × BackscatterFactor when it lies against the intensifier face.
type ChamberSpec struct {
	ChamberFromFocusMM float64 `yaml:"chamber_from_focus_mm"`
	InputFromFocusMM   float64 `yaml:"input_from_focus_mm"`
	AgainstFace        bool    `yaml:"against_face"`
	BackscatterFactor  float64 `yaml:"backscatter_factor"`
	// Vented chambers respond to the mass of air in their cavity: at room
	// air (T, P) they read true × k_TP⁻¹ with k_TP relative to the
	// reference conditions given here (nil: a sealed chamber).
	Vented *VentedSpec `yaml:"vented"`
}

// PositionSpec is the photometer's place on the output face.
type PositionSpec struct {
	R        float64 `yaml:"r"`
	AngleDeg float64 `yaml:"angle_deg"`
}

// Fault kinds.
const (
	FaultCablePulled = "cable_pulled"
	FaultStalled     = "stalled"
	FaultGarbage     = "garbage"
	FaultOverRange   = "over_range"
	FaultWrongUnit   = "wrong_unit"
)

// FaultSpec is one injected fault. It starts At simulated time after the
// bench starts, or After the AtBeamOn-th beam-on (counting from 1), and
// lasts Duration.
type FaultSpec struct {
	Kind     string        `yaml:"kind"`
	Meter    string        `yaml:"meter"` // "dosimeter" or "photometer"
	At       time.Duration `yaml:"at"`
	AtBeamOn int           `yaml:"at_beam_on"`
	After    time.Duration `yaml:"after"`
	Duration time.Duration `yaml:"duration"`
	// Unit printed during a wrong_unit fault (default "uSv/h" for a
	// dosimeter, "lux" for a photometer).
	Unit string `yaml:"unit"`
}

// Protocol names.
const (
	ProtocolVeltrane = "veltrane-kr40"
	ProtocolOndrakel = "ondrakel-dx2"
	ProtocolVessoric = "vessoric-lm9"
)

// Meter roles, as in a bench file.
const (
	RoleDosimeter  = "dosimeter"
	RolePhotometer = "photometer"
)

// ScenarioError is a scenario problem with the place it was found (the
// shared position error of kermalux's files).
type ScenarioError = filepos.Error

// MaxScenarioBytes bounds a scenario file: the shipped ones are a few
// kilobytes.
const MaxScenarioBytes = 1 << 20

// LoadScenario reads and checks a scenario file (at most MaxScenarioBytes).
func LoadScenario(path string) (*Scenario, error) {
	data, err := filepos.ReadFile(path, MaxScenarioBytes, "scenario file")
	if err != nil {
		return nil, fmt.Errorf("reading scenario: %w", err)
	}
	return ParseScenario(path, data)
}

// ParseScenario decodes and checks a scenario; name is used in errors.
// Unknown keys are errors. Missing optional values get their defaults.
func ParseScenario(name string, data []byte) (scn *Scenario, err error) {
	var s Scenario
	if err := decodeYAML(data, &s); err != nil {
		if derr := checkDurations(name, data); derr != nil {
			return nil, derr // the decoder gives no line for a bad duration
		}
		return nil, yamlError(name, err)
	}
	s.Source = name
	if err := s.check(); err != nil {
		var pe *pathError
		if errors.As(err, &pe) {
			return nil, &ScenarioError{File: name, Line: lineOf(data, pe.path), Msg: pe.msg}
		}
		return nil, &ScenarioError{File: name, Msg: err.Error()}
	}
	return &s, nil
}

// decodeYAML decodes strictly. The YAML decoder panics on some malformed
// documents (found by fuzzing, e.g. "faults: ! "); that is turned into an
// error, found again by the position-reporting parser where it can.
func decodeYAML(data []byte, v any) (err error) {
	defer func() {
		if r := recover(); r != nil {
			if _, perr := parser.ParseBytes(data, 0); perr != nil {
				err = perr
				return
			}
			err = fmt.Errorf("malformed YAML: the decoder failed (%v); look for an empty tag (!) or a stray anchor", r)
		}
	}()
	return yaml.UnmarshalWithOptions(data, v, yaml.DisallowUnknownField(), yaml.Strict())
}

func yamlError(name string, err error) error {
	var ye yaml.Error
	if errors.As(err, &ye) {
		line := 0
		if tk := ye.GetToken(); tk != nil && tk.Position != nil {
			line = tk.Position.Line
		}
		return &ScenarioError{File: name, Line: line, Msg: ye.GetMessage()}
	}
	return &ScenarioError{File: name, Msg: err.Error()}
}

// durationKeys are the keys whose values are durations.
var durationKeys = map[string]bool{"time_constant": true, "width": true, "over": true,
	"response_time": true, "integration_time": true, "at": true, "after": true, "duration": true}

// durationFinder reports the first duration value that does not parse.
type durationFinder struct{ err error }

func (d *durationFinder) Visit(n ast.Node) ast.Visitor {
	if d.err != nil {
		return nil
	}
	if mv, ok := n.(*ast.MappingValueNode); ok && mv.Key != nil && durationKeys[mv.Key.String()] {
		if v, ok := mv.Value.(*ast.StringNode); ok {
			if _, err := time.ParseDuration(v.Value); err != nil {
				tk := v.GetToken()
				d.err = &ScenarioError{Line: tk.Position.Line,
					Msg: fmt.Sprintf("%s: %q is not a duration (write e.g. 0.3s or 250ms)", mv.Key.String(), v.Value)}
			}
		}
	}
	return d
}

func checkDurations(name string, data []byte) error {
	f, err := parser.ParseBytes(data, 0)
	if err != nil {
		return nil
	}
	d := &durationFinder{}
	for _, doc := range f.Docs {
		ast.Walk(d, doc)
	}
	if d.err != nil {
		d.err.(*ScenarioError).File = name
	}
	return d.err
}

// pathError is a check failure at a YAML path like "$.dosimeter.noise".
type pathError struct {
	path string
	msg  string
}

func (e *pathError) Error() string { return e.path + ": " + e.msg }

func bad(path, format string, args ...any) error {
	return &pathError{path: path, msg: strings.TrimPrefix(path, "$.") + ": " + fmt.Sprintf(format, args...)}
}

// lineOf finds the line of the node at path, walking up to a parent that
// exists when the node itself is absent.
func lineOf(data []byte, path string) int {
	f, err := parser.ParseBytes(data, 0)
	if err != nil {
		return 0
	}
	for p := path; p != "$" && p != ""; {
		yp, err := yaml.PathString(p)
		if err == nil {
			if n, err := yp.FilterFile(f); err == nil && n != nil && n.GetToken() != nil {
				return n.GetToken().Position.Line
			}
		}
		i := strings.LastIndexAny(p, ".[")
		if i <= 0 {
			break
		}
		p = p[:i]
	}
	return 0
}

// check validates the scenario and fills in defaults.
// meterDefaults are each demo meter's serial number, firmware and link
// name prefix when a scenario leaves them out (all invented).
var meterDefaults = map[string]struct{ serial, firmware, link string }{
	ProtocolVeltrane: {"KR40-1187", "2.3", "veltrane"},
	ProtocolOndrakel: {"DX2-30417", "1.08", "ondrakel"},
	ProtocolVessoric: {"LM9-5521", "", "vessoric"},
}

func (s *Scenario) check() error {
	if err := checkFinite("$", reflect.ValueOf(s).Elem()); err != nil {
		return err
	}
	if a := s.Air; a != nil {
		if a.TemperatureC < -10 || a.TemperatureC > 50 {
			return bad("$.room_air.temperature_c", "must be -10..50 °C, got %g", a.TemperatureC)
		}
		if a.PressureKPa < 50 || a.PressureKPa > 120 {
			return bad("$.room_air.pressure_kpa", "must be 50..120 kPa, got %g", a.PressureKPa)
		}
	}
	if c := s.Dosimeter.Chamber; c != nil && c.Vented != nil {
		v := c.Vented
		if v.ReferenceTemperatureC < 0 || v.ReferenceTemperatureC > 40 || v.ReferencePressureKPa < 50 || v.ReferencePressureKPa > 120 {
			return bad("$.dosimeter.chamber.vented", "reference conditions must be 0..40 °C and 50..120 kPa, got %g °C, %g kPa", v.ReferenceTemperatureC, v.ReferencePressureKPa)
		}
	}
	if s.Speed == 0 {
		s.Speed = 20
	}
	if s.Speed < 0 || s.Speed > 1000 {
		return bad("$.speed", "must be between 0 and 1000 (times real time), got %g", s.Speed)
	}
	in := &s.Intensifier
	if in.TubeVoltageKV == 0 {
		in.TubeVoltageKV = 70
	}
	if in.TubeVoltageKV < 40 || in.TubeVoltageKV > 150 {
		return bad("$.intensifier.tube_voltage_kv", "must be 40..150 kV, got %g", in.TubeVoltageKV)
	}
	if in.KVExponent == 0 {
		in.KVExponent = 2
	}
	if len(in.FieldModes) == 0 {
		return bad("$.intensifier.field_modes", "at least one field mode is needed")
	}
	full := in.FieldModes[0]
	seen := map[string]bool{}
	for i := range in.FieldModes {
		m := &in.FieldModes[i]
		p := fmt.Sprintf("$.intensifier.field_modes[%d]", i)
		if m.Name == "" {
			return bad(p, "field mode needs a name")
		}
		if seen[m.Name] {
			return bad(p+".name", "field mode %q given twice", m.Name)
		}
		seen[m.Name] = true
		if m.DiameterCM <= 0 || m.DiameterCM > 60 {
			return bad(p+".diameter_cm", "must be 0..60 cm, got %g", m.DiameterCM)
		}
		if m.DiameterCM > full.DiameterCM {
			return bad(p+".diameter_cm", "the first field mode must be the largest")
		}
		ratio := m.DiameterCM / full.DiameterCM
		if m.ConversionFactor == 0 {
			if i == 0 {
				return bad(p+".conversion_factor", "the first field mode needs a conversion factor")
			}
			m.ConversionFactor = full.ConversionFactor * ratio * ratio
		}
		if m.KermaRate == 0 {
			if i == 0 {
				return bad(p+".kerma_rate", "the first field mode needs a kerma rate")
			}
			m.KermaRate = full.KermaRate / (ratio * ratio)
		}
		if m.ConversionFactor < 0 {
			return bad(p+".conversion_factor", "must be positive, got %g", m.ConversionFactor)
		}
		if m.KermaRate < 0 {
			return bad(p+".kerma_rate", "must be positive, got %g", m.KermaRate)
		}
	}
	if in.StartMode == "" {
		in.StartMode = full.Name
	} else if !seen[in.StartMode] {
		return bad("$.intensifier.start_mode", "no field mode named %q", in.StartMode)
	}
	v := in.Vignetting
	if v.EdgeFalloff < 0 || v.EdgeFalloff*(1+math.Abs(v.Asymmetry)) >= 1 {
		return bad("$.intensifier.vignetting", "edge_falloff·(1+|asymmetry|) must be in [0,1)")
	}
	if in.ContrastRatio == 0 {
		in.ContrastRatio = 20
	}
	if in.ContrastRatio < 1 {
		return bad("$.intensifier.contrast_ratio", "must be at least 1, got %g", in.ContrastRatio)
	}
	if in.LeadDiskRadius == 0 {
		in.LeadDiskRadius = 0.05
	}
	if in.LeadDiskRadius < 0 || in.LeadDiskRadius >= 1 {
		return bad("$.intensifier.lead_disk_radius", "must be a fraction of the output radius in (0,1)")
	}
	if in.DarkLuminance < 0 {
		return bad("$.intensifier.dark_luminance", "must not be negative")
	}
	if in.PhantomTransmission == 0 {
		in.PhantomTransmission = 1
	}
	if in.PhantomTransmission < 0 || in.PhantomTransmission > 1 {
		return bad("$.intensifier.phantom_transmission", "must be in (0,1]")
	}
	b := &in.Brightness
	if b.TimeConstant < 0 {
		return bad("$.intensifier.brightness_control.time_constant", "must not be negative")
	}
	if b.TimeConstant == 0 { // also used when switched on later
		b.TimeConstant = 400 * time.Millisecond
	}
	if b.StartFraction == 0 {
		b.StartFraction = 0.3
	}
	if b.StartFraction < 0 || b.StartFraction > 5 {
		return bad("$.intensifier.brightness_control.start_fraction", "must be in (0,5]")
	}
	if p := in.Pulsed; p != nil {
		if p.RateHz <= 0 || p.RateHz > 60 {
			return bad("$.intensifier.pulsed.rate_hz", "must be in (0,60] pulses/s, got %g", p.RateHz)
		}
		if p.Width <= 0 || p.Width.Seconds()*p.RateHz >= 1 {
			return bad("$.intensifier.pulsed.width", "must be positive and shorter than the pulse period")
		}
	}
	q := &in.QuantumNoise
	if q.Relative < 0 || q.Relative > 1 {
		return bad("$.intensifier.quantum_noise.relative", "must be in [0,1]")
	}
	if q.AtKermaRate == 0 {
		q.AtKermaRate = 1
	}
	if q.Over == 0 {
		q.Over = time.Second
	}
	if q.AtKermaRate < 0 || q.Over < 0 {
		return bad("$.intensifier.quantum_noise", "at_kerma_rate and over must be positive")
	}
	if err := s.Dosimeter.check("$.dosimeter", RoleDosimeter); err != nil {
		return err
	}
	if err := s.Photometer.check("$.photometer", RolePhotometer); err != nil {
		return err
	}
	for i := range s.Faults {
		if err := s.Faults[i].check(fmt.Sprintf("$.faults[%d]", i)); err != nil {
			return err
		}
	}
	return nil
}

var printedUnits = map[string][]string{
	ProtocolVeltrane: {"uGy/s", "mR/s", "mR/min"},
	ProtocolOndrakel: {"UGY/S", "MR/S", "MR/MIN"},
	ProtocolVessoric: {"cd/m2", "fL"},
}

func (m *MeterSpec) check(p, role string) error {
	switch role {
	case RoleDosimeter:
		if m.Protocol == "" {
			m.Protocol = ProtocolVeltrane
		}
		if m.Protocol != ProtocolVeltrane && m.Protocol != ProtocolOndrakel {
			return bad(p+".protocol", "a dosimeter speaks %q or %q, not %q", ProtocolVeltrane, ProtocolOndrakel, m.Protocol)
		}
		if m.Range == (RangeSpec{}) {
			m.Range = RangeSpec{Min: 0.005, Max: 500}
		}
		if m.ResponseTime == 0 {
			m.ResponseTime = 300 * time.Millisecond
		}
		if m.Chamber == nil {
			m.Chamber = &ChamberSpec{}
		}
		c := m.Chamber
		if c.InputFromFocusMM == 0 {
			c.InputFromFocusMM = 1000
		}
		if c.ChamberFromFocusMM == 0 {
			c.ChamberFromFocusMM = c.InputFromFocusMM
		}
		if c.BackscatterFactor == 0 {
			c.BackscatterFactor = 1
		}
		if c.InputFromFocusMM < 100 || c.ChamberFromFocusMM < 100 || c.ChamberFromFocusMM > c.InputFromFocusMM {
			return bad(p+".chamber", "distances must be at least 100 mm and the chamber no farther from the focus than the input plane")
		}
		if c.BackscatterFactor < 1 || c.BackscatterFactor > 1.6 {
			return bad(p+".chamber.backscatter_factor", "must be in [1,1.6], got %g", c.BackscatterFactor)
		}
		if m.Position != nil {
			return bad(p+".position", "a dosimeter has a chamber, not a photometer position")
		}
	case RolePhotometer:
		if m.Protocol == "" {
			m.Protocol = ProtocolVessoric
		}
		if m.Protocol != ProtocolVessoric {
			return bad(p+".protocol", "a photometer speaks %q, not %q", ProtocolVessoric, m.Protocol)
		}
		if m.Range == (RangeSpec{}) {
			m.Range = RangeSpec{Min: 0.01, Max: 9999}
		}
		if m.ResponseTime == 0 {
			m.ResponseTime = 500 * time.Millisecond
		}
		if m.MaxRateHz == 0 {
			m.MaxRateHz = 50
		}
		if m.Position == nil {
			m.Position = &PositionSpec{}
		}
		if m.Position.R < 0 || m.Position.R > 1 {
			return bad(p+".position.r", "must be a fraction of the output radius in [0,1]")
		}
		if m.Chamber != nil {
			return bad(p+".chamber", "a photometer has no chamber")
		}
	}
	if d, ok := meterDefaults[m.Protocol]; ok {
		if m.Serial == "" {
			m.Serial = d.serial
		}
		if m.Firmware == "" {
			m.Firmware = d.firmware
		}
		if m.LinkName == "" {
			m.LinkName = d.link + "-" + m.Serial
		}
	}
	if strings.ContainsAny(m.LinkName, "/ \t") {
		return bad(p+".link_name", "must be a plain file name, got %q", m.LinkName)
	}
	units := printedUnits[m.Protocol]
	if m.Unit == "" {
		m.Unit = units[0]
	}
	ok := false
	for _, u := range units {
		ok = ok || u == m.Unit
	}
	if !ok {
		return bad(p+".unit", "%s prints one of %s, not %q", m.Protocol, strings.Join(units, ", "), m.Unit)
	}
	if m.Noise < 0 || m.Noise > 1 || m.NoiseFloor < 0 {
		return bad(p+".noise", "noise must be a relative standard deviation in [0,1] and noise_floor not negative")
	}
	if m.CalibrationError <= -1 || m.CalibrationError > 1 {
		return bad(p+".calibration_error", "must be in (-1,1], got %g", m.CalibrationError)
	}
	if m.Range.Min < 0 || m.Range.Max <= m.Range.Min {
		return bad(p+".range", "needs 0 <= min < max, got %g..%g", m.Range.Min, m.Range.Max)
	}
	if m.ResponseTime < 0 {
		return bad(p+".response_time", "must not be negative")
	}
	if m.IntegrationTime == 0 {
		m.IntegrationTime = m.ResponseTime
	}
	if m.IntegrationTime <= 0 {
		return bad(p+".integration_time", "must be positive")
	}
	if m.MaxRateHz < 0 || (role == RoleDosimeter && m.MaxRateHz != 0) {
		return bad(p+".max_rate_hz", "only a streaming photometer has a maximum rate")
	}
	return nil
}

func (f *FaultSpec) check(p string) error {
	switch f.Kind {
	case FaultCablePulled, FaultStalled, FaultGarbage, FaultOverRange, FaultWrongUnit:
	default:
		return bad(p+".kind", "unknown fault %q (known: %s, %s, %s, %s, %s)", f.Kind,
			FaultCablePulled, FaultStalled, FaultGarbage, FaultOverRange, FaultWrongUnit)
	}
	if f.Meter != RoleDosimeter && f.Meter != RolePhotometer {
		return bad(p+".meter", "must be %q or %q, got %q", RoleDosimeter, RolePhotometer, f.Meter)
	}
	if f.Kind != FaultWrongUnit && f.Unit != "" {
		return bad(p+".unit", "only a wrong_unit fault prints a unit")
	}
	if f.Kind == FaultWrongUnit && f.Unit == "" {
		f.Unit = "uSv/h"
		if f.Meter == RolePhotometer {
			f.Unit = "lux"
		}
	}
	if strings.ContainsAny(f.Unit, " \r\n") {
		return bad(p+".unit", "a printed unit has no spaces or line ends")
	}
	if f.At < 0 || f.After < 0 || f.AtBeamOn < 0 {
		return bad(p, "at, after and at_beam_on must not be negative")
	}
	if f.AtBeamOn == 0 && f.After != 0 {
		return bad(p+".after", "after counts from a beam-on: give at_beam_on")
	}
	if f.AtBeamOn > 0 && f.At != 0 {
		return bad(p+".at", "give either at or at_beam_on, not both")
	}
	if f.Duration <= 0 {
		return bad(p+".duration", "a fault needs a positive duration")
	}
	return nil
}
