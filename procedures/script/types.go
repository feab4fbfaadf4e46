// Package script reads, checks and flattens kermalux procedure scripts.
//
// A procedure script is a YAML file (see FORMAT.md) that says what the
// engineer is told, which values are entered, what is measured under which
// bench set-up, what is computed from the measurements and how each result
// is judged. [Parse] and [Load] turn the text into a [Procedure] whose every
// part remembers where it was written (file, line, column); [Check] returns
// every problem found, each with its position; [Flatten] expands includes
// and per-field-mode repetitions into the linear list of steps the run
// engine walks, so that "step 14 of 31" is well defined and a resumed
// session can find its step again by id.
package script

import (
	"fmt"
	"time"

	"kermalux/drivers/units"
)

// Pos is where something was written in a script.
type Pos struct {
	File string
	Line int // 1-based
	Col  int // 1-based
}

// String formats the position as file:line:col.
func (p Pos) String() string {
	if p.Line == 0 {
		return p.File
	}
	return fmt.Sprintf("%s:%d:%d", p.File, p.Line, p.Col)
}

// Procedure is a parsed script.
type Procedure struct {
	Name    string // short machine name, used by include and in journals
	Title   string // what the engineer hears and reads
	Version string
	// BeamBudget is the declared maximum cumulative beam-on time of the
	// whole procedure, includes and repetitions counted.
	BeamBudget time.Duration
	Meters     []string // meters the procedure needs ("dosimeter", "photometer")
	Defaults   Defaults
	Steps      []Step
	File       string // the file it was read from (or the name given to Parse)
	SHA256     string // hex SHA-256 of the script text (journalled with a session)
	Pos        Pos    // position of the document
	Fields     map[string]Pos
}

// Defaults apply to measure steps that do not say otherwise.
type Defaults struct {
	Precision float64       // relative expanded uncertainty target (0.02 = 2 %); 0: none given
	MaxBeam   time.Duration // per reading position; 0: none given
	MinBeam   time.Duration // per reading position, kept in reserve; 0: none given
	Expect    []Expect
}

// Step is one step as written. Exactly one of the kind-specific parts is
// set, according to Kind (say, prepare and the checklists need none beyond
// Text, Setup and Items).
type Step struct {
	ID    string
	Kind  StepKind
	Text  string // spoken and shown; may contain {mode} within per_field_mode
	Setup Setup  // bench state wanted (prepare, measure)
	Items []Item // checklist lines

	Enter   *ValueRequest
	Measure *MeasureSpec
	Compute *ComputeSpec
	Judge   *JudgeSpec
	Repeat  *RepeatSpec
	Include *IncludeSpec

	Pos    Pos            // position of the step's first key
	Fields map[string]Pos // position of each key written in the step
}

// Item is one checklist line.
type Item struct {
	Text string
	Pos  Pos
}

// Setting is one bench setting in a setup block: a key from SetupKeys and
// its value normalised to text ("70 kV", "21 mm Al", "0.9 r", "90 deg",
// "removed", "on").
type Setting struct {
	Key   string
	Value string
	Pos   Pos
}

// Setup is a bench set-up, in the order written.
type Setup []Setting

// Map returns the setup as the string key/values a panel.Prompt carries.
// It returns nil for an empty setup.
func (s Setup) Map() map[string]string {
	if len(s) == 0 {
		return nil
	}
	m := make(map[string]string, len(s))
	for _, kv := range s {
		m[kv.Key] = kv.Value
	}
	return m
}

// Get returns the value of key and whether it is set.
func (s Setup) Get(key string) (string, bool) {
	for _, kv := range s {
		if kv.Key == key {
			return kv.Value, true
		}
	}
	return "", false
}

// Setup keys. Values: field_mode any text; tube_voltage in kV; tube_current
// in mA; added_filter "<length> <material>" ("21 mm Al"); grid "in" or
// "removed"; lead_disk, phantom "in" or "out"; photometer_radius a fraction
// of the output radius ("0.9 r"); photometer_angle in degrees, counted
// anticlockwise from "right" as seen facing the output window ("90 deg" is
// up); brightness_control "on" or "off"; chamber "input plane" or a distance
// from the focal spot ("100 cm").
const (
	SetFieldMode         = "field_mode"
	SetTubeVoltage       = "tube_voltage"
	SetTubeCurrent       = "tube_current"
	SetAddedFilter       = "added_filter"
	SetGrid              = "grid"
	SetLeadDisk          = "lead_disk"
	SetPhotometerRadius  = "photometer_radius"
	SetPhotometerAngle   = "photometer_angle"
	SetPhantom           = "phantom"
	SetBrightnessControl = "brightness_control"
	SetChamber           = "chamber"
	SetBeamQuality       = "beam_quality"
)

// LargestMode as a field mode names the bench's largest field mode; Flatten
// replaces it by the first of Env.FieldModes (benches list their modes
// largest first) when they are given.
const LargestMode = "largest"

// Source is where an entered value's default comes from.
type Source string

// Value sources.
const (
	FromOperator Source = "operator" // the engineer reads it off and confirms it
	FromBench    Source = "bench"    // the bench file's value, confirmed by a press
	FromSensor   Source = "sensor"   // the board's own sensor, confirmed by a press
)

// ValueRequest is the value an enter step asks for, as the procedure
// writes it: its name, unit, plausible range, default and where the default
// comes from (the engine asks it as an engine.ValueRequest).
type ValueRequest struct {
	Name       string         // value name, referred to as entered.<Name>
	Quantity   units.Quantity // from Unit
	Unit       string         // the unit it is asked in
	Min, Max   float64        // plausible range, in Unit
	Default    float64        // in Unit, valid when HasDefault
	HasDefault bool
	Source     Source

	// Units the range and default were written in, converted into Unit
	// once Unit is known.
	rangeUnit, defUnit       string
	rangePos                 Pos
	rangeChecked, defChecked bool
}

// Read is one meter read in a measure step and the quantity it gives.
type Read struct {
	Meter    string
	Quantity units.Quantity
	Pos      Pos
}

// Position is one photometer position of a multi-position measurement.
type Position struct {
	Label  string  // spoken: "up, nine tenths of the radius" is said from Label
	Radius float64 // fraction of the output radius (0 = centre)
	Angle  float64 // degrees anticlockwise from right, facing the output
	Pos    Pos
}

// Expect is an expected range of a quantity; a reading far outside stops
// the step (safety stop) rather than being used.
type Expect struct {
	Quantity units.Quantity
	Min, Max float64 // canonical unit of Quantity
	Pos      Pos
}

// MeasureSpec describes the readings of a measure step.
type MeasureSpec struct {
	Reads []Read
	// Beam is true for a reading with the beam on (an exposure); false
	// for a dark (beam-off) reading.
	Beam        bool
	BeamQuality string // IEC 61267 name, "RQA5"; empty if none required
	FieldMode   string // may be "{mode}" within per_field_mode
	Positions   []Position
	Precision   float64       // relative expanded uncertainty target; 0: take Defaults
	MaxBeam     time.Duration // per position; 0: take Defaults
	// MinBeam is the beam-on a position is sure to get however much the
	// positions before it used: the budget of every procedure it is
	// written in keeps it in reserve (0: take Defaults, else MaxBeam,
	// which reserves the whole of each position as a plain sum would).
	MinBeam  time.Duration
	Duration time.Duration // collect for this long instead of stopping at precision (stability checks)
	MaxDrift float64       // relative; for stability checks with Duration; 0: not judged
	Expect   []Expect
}

// PositionCount is the number of readings the step takes (1 without
// positions).
func (m *MeasureSpec) PositionCount() int {
	if len(m.Positions) == 0 {
		return 1
	}
	return len(m.Positions)
}

// Figure names a figure of merit.
type Figure string

// Figures of merit the compute step knows, with the input roles each needs.
const (
	// Conversion factor G_x = L / K̇ (IEC 61262-2): roles luminance and
	// air_kerma_rate; optional dark_luminance, dark_air_kerma_rate.
	FigConversionFactor Figure = "conversion_factor"
	// Luminance non-uniformity from a multi-position luminance
	// measurement (IEC 61262-3): role luminance.
	FigNonUniformity Figure = "non_uniformity"
	// Contrast ratio L_open / L_disk (IEC 61262-6): roles open, disk;
	// optional dark.
	FigContrastRatio Figure = "contrast_ratio"
	// Input air kerma rate at the input plane: role air_kerma_rate.
	FigInputKermaRate Figure = "input_kerma_rate"
	// Ratio of a field mode's input kerma rate to a reference mode's:
	// roles air_kerma_rate, reference.
	// (Procedures written before it was renamed say kerma_mode_scaling,
	// which the parser still reads as this: see legacyFigures.)
	FigKermaRateScaling Figure = "kerma_rate_scaling"
	// Stability of a meter over a fixed-duration reading, as the relative
	// change of its trend over the duration: role reading.
	FigStability Figure = "stability"
	// Mean dark reading (offset) of a meter: role reading.
	FigDarkLevel Figure = "dark_level"
)

// Input is one named input of a compute step: a role and the id of the
// measure step that supplies it. Ref may name a step in another field-mode
// repetition as "id@mode".
type Input struct {
	Role string
	Ref  string
	// Resolved is the flattened id of the step referred to; set by Flatten.
	Resolved string
	Pos      Pos
}

// ComputeSpec computes a figure of merit.
type ComputeSpec struct {
	Figure Figure
	Inputs []Input
}

// Input returns the input with the role and whether there is one.
func (c *ComputeSpec) Input(role string) (Input, bool) {
	for _, in := range c.Inputs {
		if in.Role == role {
			return in, true
		}
	}
	return Input{}, false
}

// LimitKind is what a limit compares with.
type LimitKind string

// Limit kinds.
const (
	SpecMin     LimitKind = "min"          // specification: result ≥ value
	SpecMax     LimitKind = "max"          // specification: result ≤ value
	BaselineMin LimitKind = "baseline_min" // result ≥ value × baseline (value a fraction)
	BaselineMax LimitKind = "baseline_max" // result ≤ value × baseline
	ActionMin   LimitKind = "action_min"   // action level: result ≥ value
	ActionMax   LimitKind = "action_max"   // action level: result ≤ value
)

// JudgeLimit is one limit of a judge step: either a number (Value, already
// converted from Unit: "90 %" is 0.9) or a reference to a session input
// such as "spec.conversion_factor_min" (Ref set, Value unused).
type JudgeLimit struct {
	Kind  LimitKind
	Value float64
	Unit  string
	Ref   string
	Pos   Pos
}

// JudgeSpec judges a result.
type JudgeSpec struct {
	Result string // id of the compute step
	// Resolved is the flattened id of the compute step; set by Flatten.
	Resolved string
	Limits   []JudgeLimit
}

// RepeatSpec repeats Steps once per field mode, substituting {mode} in
// texts, setups and measure field modes.
type RepeatSpec struct {
	Modes []string // listed modes; empty when FromBench
	// FromBench takes the modes from the bench file at run time; MaxModes
	// bounds how many there may be (for the beam budget).
	FromBench bool
	MaxModes  int
	Steps     []Step
}

// IncludeSpec runs another procedure here.
type IncludeSpec struct {
	Procedure string // a built-in's name or a path relative to the including file
	// Once skips the include when the same procedure was already included
	// earlier in the flattened sequence (a shared safety checklist).
	Once bool
	// Resolved is the included procedure; set by Flatten (and by Check).
	Resolved *Procedure
}

// Flat is a procedure flattened into the steps the engine walks.
type Flat struct {
	Procedure  *Procedure
	BeamBudget time.Duration
	Steps      []FlatStep
}

// FlatStep is one step of a flattened procedure. Step is a copy of the
// written step with {mode} substituted, references resolved and the
// defaults of the procedure it was written in filled in (a measure step's
// Precision, MaxBeam and Expect); it is never a per_field_mode or include
// step.
type FlatStep struct {
	Index     int    // 1-based
	Of        int    // len(Flat.Steps)
	ID        string // stable: include path, step id and field mode ("cf/light@32 cm")
	FieldMode string // empty outside per_field_mode
	Procedure string // name of the procedure the step was written in
	// Part is the id of the top-level include the step comes from (the
	// part of a sequence such as acceptance: "cf" of "cf/light@32 cm"),
	// and PartTitle that procedure's title; both empty for the steps
	// written in the top-level procedure itself.
	Part, PartTitle string
	// Pools are the beam-on budgets the step's readings count against,
	// outermost first: the top-level procedure's, then each included
	// procedure's that declares one (set for beam steps only).
	Pools []Pool
	Step  Step
}

// Pool is one procedure instance's beam-on budget: ID is its include
// path ("" for the top-level procedure, "uniformity/" for an include),
// Budget what it declares. The engine stops a reading where the budget,
// less the reserves (MinBeam and ReleaseTime) of the readings still to
// come in the same pool, is used up, so the budget holds whatever one
// reading takes; the checker proves that the reserves fit.
type Pool struct {
	ID        string
	Procedure string
	Budget    time.Duration
}

// MaxBeam returns the longest beam-on time the step may use (0 for a step
// without beam). Flatten has already filled in the procedure's defaults.
func (f FlatStep) MaxBeam() time.Duration {
	return stepBeam(&f.Step, Defaults{})
}

// ReleaseTime is the beam-on a beam reading position is allowed beyond
// its max_beam for its release: from "Release the beam" until the beam
// is off (the operator's foot, the generator switching off). The engine
// stops each position's attempts, their releases included, at max_beam,
// and its beam-on timer counts the last release too; the budget the
// checker adds up is what the timer counts (common practice: a prompt
// release takes well under a second).
const ReleaseTime = time.Second

// Reserve returns the beam-on the step's readings keep in reserve in
// their pools: MinBeam and ReleaseTime for each position (0 for a step
// without beam).
func (f FlatStep) Reserve() time.Duration {
	if f.Step.Kind != KindMeasure || f.Step.Measure == nil || !f.Step.Measure.Beam {
		return 0
	}
	m := f.Step.Measure
	return (m.reserve() + ReleaseTime) * time.Duration(m.PositionCount())
}

// reserve is one position's reserve without its release: MinBeam, else
// MaxBeam.
func (m *MeasureSpec) reserve() time.Duration {
	if m.MinBeam > 0 {
		return m.MinBeam
	}
	return m.MaxBeam
}

func stepBeam(s *Step, d Defaults) time.Duration {
	if s.Kind != KindMeasure || s.Measure == nil || !s.Measure.Beam {
		return 0
	}
	mb := s.Measure.MaxBeam
	if mb == 0 {
		mb = d.MaxBeam
	}
	return (mb + ReleaseTime) * time.Duration(s.Measure.PositionCount())
}
