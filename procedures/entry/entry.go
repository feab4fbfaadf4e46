// Package entry defines what a session journal records: the payloads of
// journal records, shared by the engine that writes them, the journal that
// chains and signs them, the workstation store that keeps them and the
// report that shows them. It has no dependencies so every layer can use it.
//
// JSON field names here are a stable contract: journals written today must
// be readable by next year's workstation. Add fields; never rename them.
package entry

import (
	"encoding/json"
	"time"
)

// Kind names a record's payload type.
type Kind string

const (
	KindSession    Kind = "session"     // Session: first record of a session
	KindStep       Kind = "step"        // Step: a step started, finished, retaken, skipped
	KindPrompt     Kind = "prompt"      // Prompt: something said or asked
	KindAck        Kind = "ack"         // Ack: the operator's answer
	KindValue      Kind = "value"       // Value: a value entered (temperature, kV...)
	KindReading    Kind = "reading"     // Reading: one raw + corrected meter reading
	KindEvent      Kind = "event"       // Event: beam on/off, meter lost/back, alarm, discard
	KindResult     Kind = "result"      // Result: a figure of merit with budget and verdict
	KindSessionEnd Kind = "session_end" // SessionEnd: last record of a finished session
)

// Item is one record to append: its kind and payload. A journal appends
// a slice of them in one durable write (one transaction, one fsync), which
// is how the engine journals a burst of readings without falling behind a
// streaming meter.
type Item struct {
	Kind    Kind
	Payload any
}

// Session opens a session.
type Session struct {
	ID                string    `json:"id"`
	Site              string    `json:"site"`
	Room              string    `json:"room"`
	IntensifierModel  string    `json:"intensifier_model"`
	IntensifierSerial string    `json:"intensifier_serial"`
	Engineer          string    `json:"engineer"`
	Procedure         string    `json:"procedure"`      // procedure name
	ProcedureHash     string    `json:"procedure_hash"` // SHA-256 of the script text
	BenchHash         string    `json:"bench_hash"`     // SHA-256 of the bench file
	SoftwareVersion   string    `json:"software_version"`
	BoardKey          string    `json:"board_key"` // hex ed25519 public key of the board
	Started           time.Time `json:"started"`
	Certificates      []CertRef `json:"certificates,omitempty"`
	// Simulated is true when the meters are the bench simulator (the
	// demo): nothing of the session is a measurement.
	Simulated bool `json:"simulated,omitempty"`
	// TestType is why the test is made: "acceptance", "yearly",
	// "after repair" (the bench file's test_type; empty when not said).
	TestType string `json:"test_type,omitempty"`
	// XRay is the X-ray system the intensifier belongs to, as the bench
	// file describes it.
	XRay *XRaySystem `json:"xray_system,omitempty"`
	// Geometry is where the chamber sat, as the bench file describes it.
	Geometry *Geometry `json:"geometry,omitempty"`
	// Language is the code of the language the board spoke and the
	// report is written in (the bench file's language; empty: English).
	Language string `json:"language,omitempty"`
	// PrevSession, PrevSerial and PrevHead name the session the board
	// began before this one (empty for its first): its id, the
	// intensifier it measured and the hash of its last record then. Signed
	// with this record, they chain the board's sessions, so that a store
	// missing a session the board sent (deleted, a failing yearly check
	// taken out of an intensifier's history) shows it from the next one.
	PrevSession string `json:"prev_session,omitempty"`
	PrevSerial  string `json:"prev_serial,omitempty"`
	PrevHead    string `json:"prev_head,omitempty"`
}

// XRaySystem identifies the fluoroscopy system the intensifier is part of.
type XRaySystem struct {
	Model           string `json:"model,omitempty"`
	Serial          string `json:"serial,omitempty"`
	Generator       string `json:"generator,omitempty"`
	GeneratorSerial string `json:"generator_serial,omitempty"`
	Tube            string `json:"tube,omitempty"`
	TubeSerial      string `json:"tube_serial,omitempty"`
}

// Geometry is the dosimeter chamber's position: distances from the focal
// spot in mm (0: not stated), whether it sat against the intensifier's
// face (backscatter then enters the reading), the backscatter factor
// divided out, and whether the anti-scatter grid was removed.
type Geometry struct {
	SourceToChamberMM float64 `json:"source_to_chamber_mm,omitempty"`
	SourceToInputMM   float64 `json:"source_to_input_mm,omitempty"`
	AgainstFace       bool    `json:"against_face"`
	Backscatter       float64 `json:"backscatter,omitempty"`
	GridRemoved       bool    `json:"grid_removed"`
}

// CertRef identifies a calibration certificate used in a session.
type CertRef struct {
	ID         string    `json:"id"` // certificate number
	Meter      string    `json:"meter"`
	Model      string    `json:"model"`
	Serial     string    `json:"serial"`
	Laboratory string    `json:"laboratory"`
	Calibrated time.Time `json:"calibrated"`
	Due        time.Time `json:"due"`
	Valid      bool      `json:"valid"`  // in date on the session day
	SHA256     string    `json:"sha256"` // of the certificate file
}

// StepState is what happened to a step.
type StepState string

const (
	StepStarted StepState = "started"
	StepDone    StepState = "done"
	StepRetake  StepState = "retake"
	StepSkipped StepState = "skipped"
	StepAborted StepState = "aborted"
	StepResumed StepState = "resumed"
)

// Step marks a step transition; a restart rebuilds the engine's position
// from these.
type Step struct {
	Index     int       `json:"index"` // 1-based position in the flattened procedure
	Of        int       `json:"of"`
	ID        string    `json:"id"`
	Kind      string    `json:"kind"`
	FieldMode string    `json:"field_mode,omitempty"`
	State     StepState `json:"state"`
	Reason    string    `json:"reason,omitempty"`
}

// Prompt records something said or asked.
type Prompt struct {
	Step   int    `json:"step"`
	Level  string `json:"level"`
	Action string `json:"action,omitempty"`
	Text   string `json:"text"`
	Asked  bool   `json:"asked"` // waited for an answer
	// Setup is the bench state the prompt asked for (field_mode,
	// brightness_control, tube_voltage, filter...), as the procedure
	// states it, so a report can say it per step.
	Setup map[string]string `json:"setup,omitempty"`
}

// Ack records the operator's answer to a prompt.
type Ack struct {
	Step      int       `json:"step"`
	PromptSeq int64     `json:"prompt_seq"` // journal sequence number of the prompt
	Answer    string    `json:"answer"`
	Text      string    `json:"text"` // the prompt's words, so a report can list acknowledgements alone
	At        time.Time `json:"at"`
}

// Value records a value entered or confirmed.
type Value struct {
	Step   int     `json:"step"`
	Name   string  `json:"name"`
	Value  float64 `json:"value"`
	Unit   string  `json:"unit"`
	Source string  `json:"source"` // "operator", "bench default", "procedure default", "sensor"; ", not read off" added when unconfirmed
	// Unconfirmed: the value is to be read off (the console's kV, mA) but
	// only an offered default was accepted with a press; nobody entered it.
	Unconfirmed bool   `json:"unconfirmed,omitempty"`
	FieldMode   string `json:"field_mode,omitempty"` // the field mode of the step that asked for it
	// A value read by a sensor (Source "sensor"): its standard
	// uncertainty in Unit, the sensor's role ("room_air") and its data
	// registers as read (hex).
	StdUnc float64 `json:"std_unc,omitempty"`
	Sensor string  `json:"sensor,omitempty"`
	Raw    string  `json:"raw,omitempty"`
}

// Correction is one correction applied to a reading, in the order applied.
type Correction struct {
	Name   string  `json:"name"`   // "calibration_coefficient", "k_tp", "dark", "inverse_square", "backscatter", "unit"
	Factor float64 `json:"factor"` // multiplicative factor applied (1 if none)
	Offset float64 `json:"offset"` // additive term applied after the factor (0 if none)
	Note   string  `json:"note,omitempty"`
}

// Reading is one meter reading with everything done to it.
type Reading struct {
	Step        int           `json:"step"`
	StepID      string        `json:"step_id"`
	FieldMode   string        `json:"field_mode,omitempty"`
	Position    string        `json:"position,omitempty"` // uniformity position label
	Meter       string        `json:"meter"`
	Quantity    string        `json:"quantity"`
	Raw         string        `json:"raw"` // the line as received
	RawValue    float64       `json:"raw_value"`
	RawUnit     string        `json:"raw_unit"`
	Value       float64       `json:"value"` // corrected, canonical unit
	Unit        string        `json:"unit"`
	Status      string        `json:"status"`
	Corrections []Correction  `json:"corrections,omitempty"`
	Certificate string        `json:"certificate,omitempty"`
	Calibrated  bool          `json:"calibrated"`
	Flags       []string      `json:"flags,omitempty"` // why not calibrated, etc.
	Mono        time.Duration `json:"mono_ns"`
	Wall        time.Time     `json:"wall"`
	BootID      string        `json:"boot_id"`
	Used        bool          `json:"used"` // entered the result (false: settling, discarded)
}

// Event records something that happened.
type Event struct {
	Step   int     `json:"step"`
	Name   string  `json:"name"` // "beam_on", "beam_off", "meter_lost", "meter_back", "beam_alarm", "beam_warning", "kerma_out_of_range", "samples_discarded", "paused", "aborted"
	Detail string  `json:"detail,omitempty"`
	BeamOn float64 `json:"beam_on_s"` // cumulative beam-on seconds at the event
	// Meter is what a meter said about itself ("meter_identified" events).
	Meter *MeterIdentity `json:"meter,omitempty"`
}

// MeterIdentity records a meter's identification at the start of a
// session (and of a resumed one) and whether its certificate applies.
type MeterIdentity struct {
	Role     string `json:"role"` // "dosimeter", "photometer"
	Maker    string `json:"maker,omitempty"`
	Model    string `json:"model,omitempty"`
	Serial   string `json:"serial,omitempty"`
	Firmware string `json:"firmware,omitempty"`
	Raw      string `json:"raw,omitempty"`   // the identification reply as received
	Error    string `json:"error,omitempty"` // why the meter could not be identified
	// CertificateApplies: the meter reported the model and serial its
	// certificate names; Reason says why not.
	CertificateApplies bool   `json:"certificate_applies"`
	Reason             string `json:"reason,omitempty"`
}

// BudgetRow is one line of an uncertainty budget (JCGM 100:2008).
type BudgetRow struct {
	Source       string  `json:"source"`
	Type         string  `json:"type"`  // "A" or "B"
	Value        float64 `json:"value"` // estimate of the input quantity
	Unit         string  `json:"unit"`
	StdUnc       float64 `json:"std_unc"`       // standard uncertainty of the input, in its unit
	RelStdUnc    float64 `json:"rel_std_unc"`   // relative standard uncertainty
	Sensitivity  float64 `json:"sensitivity"`   // sensitivity coefficient (relative, for products)
	Contribution float64 `json:"contribution"`  // relative contribution to the result's standard uncertainty
	DoF          float64 `json:"dof,omitempty"` // degrees of freedom (0 = infinite)
}

// Result is a figure of merit as judged.
type Result struct {
	Step      int    `json:"step"`
	Procedure string `json:"procedure"`
	FieldMode string `json:"field_mode,omitempty"`
	Quantity  string `json:"quantity"` // conversion_factor, non_uniformity, contrast_ratio, input_kerma_rate, ...
	// Meter is the meter a one-meter figure (dark_level, stability) is
	// of: dosimeter or photometer; empty for the others, and in journals
	// of earlier releases (the unit tells them apart there).
	Meter      string   `json:"meter,omitempty"`
	Value      float64  `json:"value"`
	Unit       string   `json:"unit"`
	StdUnc     float64  `json:"standard_uncertainty"`
	ExpUnc     float64  `json:"expanded_uncertainty"`
	K          float64  `json:"coverage_factor"`
	Verdict    string   `json:"verdict"`    // pass, fail, info
	DecidedBy  string   `json:"decided_by"` // which limit decided the verdict
	Calibrated bool     `json:"calibrated"`
	Flags      []string `json:"flags,omitempty"`
	// FlagCodes are the machine-readable codes of calib's flags on the
	// result ("certificate_other_meter", "dark_model"...), beside the texts.
	FlagCodes    []string    `json:"flag_codes,omitempty"`
	Baseline     float64     `json:"baseline,omitempty"`
	BaselineFrac float64     `json:"baseline_fraction,omitempty"`
	Budget       []BudgetRow `json:"budget,omitempty"`
	Detail       any         `json:"detail,omitempty"` // e.g. the radial profile or the uniformity map
	// Limits are every limit the result was compared with, as absolute
	// values in the result's unit, with the margin to each.
	Limits []LimitCheck `json:"limits,omitempty"`
	// RangeFloor is the lowest value the meter reads, in the result's unit
	// (0: not known); BelowRangeFloor: it read under range, so the value
	// is only known to lie below RangeFloor.
	RangeFloor      float64 `json:"range_floor,omitempty"`
	BelowRangeFloor bool    `json:"below_range_floor,omitempty"`
}

// LimitCheck is one limit a result was compared with.
type LimitCheck struct {
	Kind     string  `json:"kind"`               // "specification", "baseline", "action level"
	Bound    string  `json:"bound"`              // "at_least" or "at_most"
	Value    float64 `json:"value"`              // the limit in the result's unit
	Fraction float64 `json:"fraction,omitempty"` // baseline limits: the fraction of baseline
	Margin   float64 `json:"margin"`             // how far inside the limit the value lies (negative: outside)
	Passed   bool    `json:"passed"`
	WithinU  bool    `json:"within_uncertainty,omitempty"` // the limit lies within the expanded uncertainty
}

// SessionEnd closes a session.
type SessionEnd struct {
	Finished time.Time `json:"finished"`
	BeamOn   float64   `json:"beam_on_s"`
	Steps    int       `json:"steps"`
	Outcome  string    `json:"outcome"` // "complete", "aborted"
	Review   int       `json:"review"`  // results that need review
}

// Envelope is a decoded journal record as the workstation and the report
// see it: the payload still encoded, to be decoded by Kind. The journal's
// own record adds the chain hash, the previous hash and the signature.
type Envelope struct {
	Seq     int64           `json:"seq"`
	Session string          `json:"session"`
	Kind    Kind            `json:"kind"`
	Wall    time.Time       `json:"wall"`
	Mono    time.Duration   `json:"mono_ns"`
	BootID  string          `json:"boot_id"`
	Payload json.RawMessage `json:"payload"`
}
