// Package drivers holds what every meter gives the rest of kermalux: the
// Reading, the status a meter reports with it, and the small Meter interface
// that dialects (SCPI, text profile) and the bench simulator implement.
//
// Values in a Reading are already in the canonical unit of their quantity
// (see package units): conversion happens once, here at the edge.
package drivers

import (
	"context"
	"errors"
	"time"

	"kermalux/drivers/units"
)

// Status is what the instrument said about a reading.
type Status string

// Instrument statuses. Only StatusOK readings may be used as measurements.
const (
	StatusOK         Status = "ok"
	StatusOverRange  Status = "over_range"
	StatusUnderRange Status = "under_range"
	StatusFault      Status = "fault"
)

// Reading is one value a meter reported, stamped by the host.
type Reading struct {
	Meter    string         // name of the meter in the bench file ("dosimeter", "photometer")
	Quantity units.Quantity // what the value measures
	Value    float64        // in units.Canonical(Quantity)
	Unit     string         // canonical unit, for display
	RawValue float64        // the number as the meter printed it
	RawUnit  string         // the unit as the meter printed it
	Status   Status
	// NoValue is true when the meter printed a marker in place of a
	// number (SCPI's 9.9E37 overflow or 9.91E37 not-a-number): Value is 0
	// and means nothing, RawValue keeps the marker as printed.
	NoValue bool
	Raw     string        // the line the reading came from, without framing
	Mono    time.Duration // host monotonic time since the clock's origin
	Wall    time.Time     // host wall-clock time
	// AfterReconnect is true on the first reading after the link to the
	// meter was lost and restored: anything in progress before should be
	// discarded by the caller.
	AfterReconnect bool
}

// Usable reports whether the reading may enter a measurement.
func (r Reading) Usable() bool { return r.Status == StatusOK }

// Identity is what a meter says about itself.
type Identity struct {
	Maker, Model, Serial, Firmware string
	Raw                            string // the identification reply as received
}

// Meter yields readings. Read returns the next fresh reading: a polled
// meter is queried; a streaming meter's next line is awaited. It never
// returns a reading that arrived before the call's link was (re)opened.
type Meter interface {
	Read(ctx context.Context) (Reading, error)
	Close() error
}

// Identifier is a meter that can identify itself.
type Identifier interface {
	Identify(ctx context.Context) (Identity, error)
}

// Errors meters return, wrapped with context; test them with errors.Is.
var (
	// ErrLinkDown: the serial link is gone (cable pulled, adapter removed).
	// Later Read calls try to reopen it.
	ErrLinkDown = errors.New("link to meter lost")
	// ErrTimeout: the meter did not answer within its read timeout.
	ErrTimeout = errors.New("meter did not answer in time")
	// ErrGarbled: a line arrived that does not match the meter's format.
	ErrGarbled = errors.New("reply not understood")
	// ErrUnit: the meter reported a unit that is unknown or of the wrong quantity.
	ErrUnit = errors.New("unexpected unit")
	// ErrMeterChanged: after a reconnect the meter on the link identified
	// as another model or serial than the one identified first. Its
	// readings must not carry on under the first meter's identity or
	// certificate; the step in progress stops.
	ErrMeterChanged = errors.New("another meter is on the link")
)

// Freshener is a meter that can drop what is waiting in its buffers, so the
// next Read returns a line the meter sent after the call. A streaming meter
// whose reader was busy elsewhere (a step that read only the other meter)
// has a backlog of old lines that would be stamped as new; the engine calls
// Discard before it starts sampling.
type Freshener interface {
	Discard()
}

// Queued is a meter whose readings arrive on their own (a streaming meter
// read by a background reader): Pending is how many have arrived and wait
// to be read. A caller that reads several meters in turn takes them all,
// so each keeps the time it arrived and none is paired with another
// meter's later readings.
type Queued interface {
	Pending() int
}

// PollDither is how far into each reading period a polled meter's reading
// instant is spread (clock.Cadence.Dither, which says why: readings on a
// fixed grid can see a pulsed beam at a fixed phase of its pulses): 1, the
// whole period, a stratified random sample of time, as many readings as
// on the grid. A meter that updates exactly once a period then gives the
// same value twice when two polls fall within one of its updates (about
// one reading in six), a small excess of readings counted for the type A
// uncertainty, against a bias of up to a quarter without.
const PollDither = 1.0
