// Package engine runs a checked, flattened procedure on a bench: it speaks
// each step through the panel, waits for acknowledgements, detects the beam
// from the dosimeter signal, waits until the brightness control and both
// meters have settled, samples until the result is precise enough, says
// "release the beam", corrects every reading, computes and judges the
// figures of merit, and journals every transition so that a restart after a
// power cut resumes at the first unfinished step.
//
// Safety is enforced here, not only by the script checker: no beam prompt
// before the pre-exposure checklist has been acknowledged, a cumulative
// beam-on timer with a warning at 4.5 minutes and an alarm every 5 minutes
// (as fluoroscopy timers do, 21 CFR 1020.32(h)), and an immediate stop when
// the kerma rate at the chamber is far above anything an intensifier input
// sees.
package engine

import (
	"context"
	"time"

	"kermalux/calib"
	"kermalux/drivers"
	"kermalux/drivers/clock"
	"kermalux/procedures/entry"
	"kermalux/procedures/panel"
)

// Meter roles: the keys of Config.Meters.
const (
	Dosimeter  = "dosimeter"
	Photometer = "photometer"
)

// StepKind says what a step does.
type StepKind string

// The step kinds the engine walks, named as the procedure file names them
// (script.KindSay...). The values are the journal's words for them (a step
// record's kind): say and prepare were journalled as "announce" and
// "instruct" from the start and keep those values.
const (
	Say       StepKind = "announce"  // say, do not wait
	Prepare   StepKind = "instruct"  // say and wait for a press
	Checklist StepKind = "checklist" // one press per line (Safety: the pre-exposure checklist)
	Enter     StepKind = "enter"     // enter or confirm a value
	Measure   StepKind = "measure"   // dark or beam reading with one or both meters
	Compute   StepKind = "compute"   // a figure of merit from earlier measurements
	Judge     StepKind = "judge"     // judge a computed result against limits
)

// Step is one step of a flattened procedure. ID is stable across runs of
// the same procedure (a resume finds its place by index and id).
type Step struct {
	ID        string
	Kind      StepKind
	Procedure string // the (included) procedure the step comes from
	// Part and PartTitle name the part of a sequence the step belongs to
	// (the top-level include: "cf", "Conversion factor in each field
	// mode"); empty for the sequence's own steps.
	Part, PartTitle string
	FieldMode       string
	Text            string
	Setup           map[string]string // machine-readable bench state, passed in panel.Prompt.Setup

	Items  []string // checklist lines
	Safety bool     // a pre-exposure safety checklist

	Value   *ValueRequest
	Measure *MeasureSpec
	Compute *ComputeSpec
	Judge   *JudgeSpec

	// Pools are the beam-on budgets a beam step's readings count against,
	// outermost first (script.Pool): a reading stops where a pool's
	// budget, less the reserves of the readings still to come in it, is
	// used up.
	Pools []BeamPool
}

// BeamPool is one procedure instance's beam-on budget: ID is its include
// path ("" for the whole procedure run).
type BeamPool struct {
	ID     string
	Budget time.Duration
}

// ValueRequest is the value an enter step asks for, converted from the
// procedure's (script.ValueRequest); the engine asks the panel for it as a
// panel.ValueRequest, its default taken from Source.
type ValueRequest struct {
	Name       string // temperature, pressure, tube_voltage, tube_current, disk_diameter...
	Unit       string
	Min, Max   float64
	Default    float64
	HasDefault bool
	Source     string // "bench", "operator", "sensor"
}

// Position is a photometer position on the output face.
type Position struct {
	Label  string  // "centre", "up 0.9r"
	Radius float64 // fraction of the output radius
	Angle  float64 // degrees
}

// Expect is the range a quantity is expected in (canonical unit). A kerma
// rate above Max stops the session (safety); other quantities outside
// their range make the attempt a retake.
type Expect struct {
	Quantity string
	Min, Max float64
}

// MeasureSpec describes a measurement.
type MeasureSpec struct {
	Meters      []string // roles: Dosimeter, Photometer
	Beam        bool     // false: a dark (beam-off) reading
	BeamQuality string   // beam quality, e.g. RQA5
	Positions   []Position
	Precision   float64       // relative expanded uncertainty to reach (0.02 = 2 %); 0: Settings.Precision
	MaxBeam     time.Duration // per position; 0: Settings.MaxBeam
	// MinBeam is what each position keeps in reserve in its pools
	// (0: MaxBeam, the whole of it).
	MinBeam  time.Duration
	Duration time.Duration // read this long instead of stopping at the target (dark, stability)
	Expect   []Expect
}

// ComputeSpec computes a figure of merit.
type ComputeSpec struct {
	// Figure: conversion_factor, non_uniformity, contrast_ratio,
	// input_kerma_rate, kerma_rate_scaling (older name
	// kerma_mode_scaling still accepted), stability, dark_level.
	Figure string
	// Inputs maps each role the figure needs (luminance, air_kerma_rate,
	// open, disk, reference, reading) to the ID of the measure step.
	Inputs map[string]string
}

// JudgeLimit is one limit of a judge step.
type JudgeLimit struct {
	// Kind: min, max (specification), baseline_min, baseline_max
	// (fraction of the baseline), action_min, action_max (action level).
	Kind  string
	Value float64
	Ref   string // a session input ("spec.conversion_factor_min") instead of Value
}

// JudgeSpec judges the result of a compute step.
type JudgeSpec struct {
	Result string // ID of the compute step
	Limits []JudgeLimit
}

// Procedure is a checked, flattened procedure.
type Procedure struct {
	Name       string
	Title      string
	Hash       string // SHA-256 of the script text
	BeamBudget time.Duration
	Steps      []Step
}

// Journal is where the engine records the session. The board journal
// (firmware-host/journal) implements it; Append is durable when it returns.
// VerifySession checks a session's hash chain, signatures and signed head;
// a resume runs it before trusting any record (an error names the record).
type Journal interface {
	Begin(ctx context.Context, s entry.Session) (string, error)
	Append(ctx context.Context, session string, kind entry.Kind, payload any) (int64, error)
	// AppendAll appends items in order in one durable write and returns
	// the last one's sequence number: all are recorded or none is. A
	// wrapper that acts on each record (a tee) must act on these too.
	AppendAll(ctx context.Context, session string, items []entry.Item) (int64, error)
	Envelopes(ctx context.Context, session string) ([]entry.Envelope, error)
	VerifySession(ctx context.Context, session string) error
}

// Conditions is what a correction needs to know besides the reading.
type Conditions struct {
	Values map[string]float64 // entered values: temperature (°C), pressure (kPa), tube_voltage (kV)...
	// Unc are the standard uncertainties (canonical units) of values read
	// by a sensor (the room-air sensor's temperature and pressure); a
	// value without one takes the corrector's own.
	Unc         map[string]float64
	BeamQuality string
	FieldMode   string
	// Dark is this meter's beam-off level in its own scale (before any
	// correction), nil when none was taken: the corrector subtracts it
	// before applying the coefficient.
	Dark *DarkLevel
}

// Corrected is a reading after calibration.
type Corrected struct {
	Value       float64
	Corrections []entry.Correction
	Certificate string
	Calibrated  bool
	Flags       []string
	// RelStdUncB is the relative standard uncertainty of type B of the
	// corrected value (certificate, resolution), for the stopping rule.
	RelStdUncB float64
	// TypeB are those components one by one, each saying whether it is
	// the meter's calibration (which cancels in a ratio of two readings of
	// the same meter) or not (resolution, dark, air density).
	TypeB []calib.Component
	// Resolution is the meter's display resolution in its own scale,
	// from the certificate that applies; 0 when not known.
	Resolution float64
	// Floor is the lowest value the meter reads, in its own scale (from
	// the certificate's range_floor); 0 when not known. Scale is the
	// product of the corrections' factors (corrected = raw × Scale +
	// offsets); 0 when not known.
	Floor, Scale float64
}

// Corrector applies a meter's calibration to its readings (calib does the
// work; an adapter wires it).
type Corrector interface {
	Correct(r drivers.Reading, c Conditions) Corrected
}

// Range is the acceptance range of a figure of merit from the bench: a
// specification or an action level, a minimum, a maximum or both (the
// engine turns each bound into a calib.Limit to judge).
type Range struct {
	Min, Max       float64
	HasMin, HasMax bool
}

// Settings are the engine's settings: what results are judged against
// (specification, action levels, baseline), the safety bounds (beam-on
// time, kerma ceiling) and how readings are taken (beam detection,
// settling, stopping rule, retries, reconnection).
type Settings struct {
	// Spec is the intensifier's specification per quantity, optionally per
	// field mode: key "conversion_factor" or "conversion_factor@32cm". It
	// judges results that no judge step judges.
	Spec map[string]Range
	// Action are local action levels, keyed like Spec.
	Action map[string]Range
	// Baseline values keyed like Spec (from an earlier results.json).
	Baseline map[string]float64
	// BaselineFraction: a result below this fraction of its baseline fails (e.g. 0.8).
	BaselineFraction float64
	// Inputs are the session inputs judge steps refer to
	// ("spec.conversion_factor_min", "action.conversion_factor_min").
	Inputs map[string]float64

	// KermaCeiling: a kerma rate at the chamber above this (µGy/s) stops the
	// session at once (the chamber is probably in the unattenuated beam).
	KermaCeiling float64
	BeamWarn     time.Duration // cumulative beam-on warning (4.5 min)
	BeamAlarm    time.Duration // cumulative beam-on alarm period (5 min)
	SpeakEvery   time.Duration // cumulative beam-on spoken every (1 min)

	// Beam detection: beam on when the dosimeter exceeds dark mean +
	// max(BeamSigmas·σ_dark, BeamFloor).
	BeamSigmas float64
	BeamFloor  float64 // µGy/s
	DarkTime   time.Duration
	BeamWait   time.Duration // how long to wait for the beam after the press

	// Settling: least-squares slope over SettleWindow, relative to the mean,
	// below SettleSlope per second, for kerma, luminance and their ratio.
	SettleWindow time.Duration
	SettleSlope  float64
	SettleMax    time.Duration // give up settling (retake) after this

	// Precision is the default type A target: the relative expanded
	// uncertainty of repeatability at which sampling stops (0.01); a
	// procedure's own precision takes its place. The calibration's part
	// is not in it (it cannot be reduced by sampling longer).
	Precision float64
	MaxBeam   time.Duration // default per-attempt maximum
	MinPairs  int           // minimum time-aligned pairs before the stopping rule may stop

	Retries    int           // attempts per measurement before the step fails
	LinkRetry  time.Duration // wait between reconnection attempts
	LinkGiveUp time.Duration // give up waiting for a lost meter (0: wait forever)

	// RecheckAfter: a session resumed after being idle this long (from its
	// last record), or on another boot than its last record's, asks the
	// pre-exposure checklist again: the room may have changed meanwhile
	// (the door warning light off after a power cut). Default 10 minutes
	// (common practice: a person who left the room checks it again).
	RecheckAfter time.Duration
}

// DefaultSettings returns the settings used where a bench file says nothing.
func DefaultSettings() Settings {
	return Settings{
		BaselineFraction: 0.8,
		KermaCeiling:     50,
		BeamWarn:         270 * time.Second,
		BeamAlarm:        300 * time.Second,
		SpeakEvery:       60 * time.Second,
		BeamSigmas:       6,
		BeamFloor:        0.02,
		DarkTime:         time.Second,
		BeamWait:         60 * time.Second,
		SettleWindow:     time.Second,
		SettleSlope:      0.02,
		SettleMax:        20 * time.Second,
		Precision:        0.01,
		MaxBeam:          30 * time.Second,
		MinPairs:         minSamples,
		Retries:          3,
		LinkRetry:        time.Second,
		RecheckAfter:     10 * time.Minute,
	}
}

// Config is everything a run needs.
type Config struct {
	Procedure  Procedure
	Meters     map[string]drivers.Meter // by role: Dosimeter, Photometer
	Correctors map[string]Corrector     // by role; nil: readings pass uncorrected, flagged uncalibrated
	// RoomAir is the room-air sensor (role RoomAir); nil: temperature and
	// pressure are entered. An enter step with source sensor takes its
	// value from it, and falls back to entering when it fails.
	RoomAir AirSensor
	Panel   panel.Panel
	Journal Journal
	Clock   clock.Clock
	Session entry.Session
	// Resume is the id of an unfinished session to continue; empty starts a new one.
	Resume string
	// Values are defaults for entered values (temperature, pressure, tube_voltage, tube_current).
	Values map[string]float64
	// CertProblems are said aloud at the start (expired or missing certificates).
	CertProblems []string
	// Warnings are said aloud (and journalled) at the start of every run,
	// resumed or not: local settings less safe than the defaults, such as
	// a kerma ceiling above 50 µGy/s.
	Warnings []string
	Settings Settings
	BootID   string
	// ReadInTurn is accepted for compatibility; meters are always read
	// in turn in the engine's goroutine.
	ReadInTurn bool
	// FieldModes are the intensifier's field modes with their nominal
	// input diameters in mm; a setup asking for field_mode "largest" or
	// "smallest" gets the mode's name.
	FieldModes map[string]float64
	// Messages are the texts in the engineer's language (the bench's
	// language key); nil speaks English.
	Messages Messages
}

// Summary is what a run achieved.
type Summary struct {
	Session string
	Outcome string // complete, aborted, paused
	Results []entry.Result
	BeamOn  time.Duration
	Steps   int // steps done
	Of      int
	Review  int // results that need review
	// Skipped are the field modes the operator chose to skip.
	Skipped []string
}

// fillSettings puts the defaults into every zero setting.
func fillSettings(l *Settings) {
	d := DefaultSettings()
	setF := func(v *float64, def float64) {
		if *v == 0 {
			*v = def
		}
	}
	setD := func(v *time.Duration, def time.Duration) {
		if *v == 0 {
			*v = def
		}
	}
	setF(&l.BaselineFraction, d.BaselineFraction)
	setF(&l.KermaCeiling, d.KermaCeiling)
	setD(&l.BeamWarn, d.BeamWarn)
	setD(&l.BeamAlarm, d.BeamAlarm)
	setD(&l.SpeakEvery, d.SpeakEvery)
	setF(&l.BeamSigmas, d.BeamSigmas)
	setF(&l.BeamFloor, d.BeamFloor)
	setD(&l.DarkTime, d.DarkTime)
	setD(&l.BeamWait, d.BeamWait)
	setD(&l.SettleWindow, d.SettleWindow)
	setF(&l.SettleSlope, d.SettleSlope)
	setD(&l.SettleMax, d.SettleMax)
	setF(&l.Precision, d.Precision)
	setD(&l.MaxBeam, d.MaxBeam)
	setD(&l.LinkRetry, d.LinkRetry)
	setD(&l.RecheckAfter, d.RecheckAfter)
	if l.MinPairs == 0 {
		l.MinPairs = d.MinPairs
	}
	if l.Retries == 0 {
		l.Retries = d.Retries
	}
}
