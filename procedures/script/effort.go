package script

import (
	"strings"
	"time"
)

// How long a person needs for the physical set-up a prompt asks for. The
// board uses these times to say how long a part of a visit will take, and
// the demo's simulated operator waits them before it answers, so that the
// demo's clock is an engineer's time, not a machine's.
//
// Every figure here is an ESTIMATE (common practice, not measured): the
// time a trained engineer in a lead apron needs at a fluoroscope with the
// equipment laid out, for one change of the setting named. A change that
// leaves a setting as it was costs nothing. Replace them with your own
// timings when you have them.
var setupTimes = map[string]time.Duration{
	SetGrid:              60 * time.Second, // unlatch and lift off (or refit) the anti-scatter grid, put it down safely
	SetChamber:           45 * time.Second, // tape the ion chamber to the input centre and route its cable, or take it out
	SetAddedFilter:       30 * time.Second, // hang (or take down) the aluminium filter at the collimator
	SetPhantom:           30 * time.Second, // place (or remove) the phantom in the beam
	SetLeadDisk:          20 * time.Second, // place (or remove) the lead disk at the input centre
	SetPhotometerRadius:  15 * time.Second, // move the photometer bracket to a marked position
	SetTubeVoltage:       10 * time.Second, // set the kV on the console
	SetTubeCurrent:       10 * time.Second, // set the mA on the console
	SetBrightnessControl: 5 * time.Second,  // switch automatic brightness control on or off
	SetFieldMode:         5 * time.Second,  // select a field mode on the console
	SetBeamQuality:       0,                // set through tube voltage and filter
	SetPhotometerAngle:   0,                // counted with the radius: one move of the bracket
}

// Other estimates (common practice, not measured), besides the set-up:
const (
	// ReadOffTime: read a value off the console or a room instrument.
	ReadOffTime = 5 * time.Second
	// ReactionTime: a press of the foot switch or the pedal once the words
	// are heard.
	ReactionTime = 700 * time.Millisecond
	// ExposureTime: one exposure from the pedal to the release, the beam
	// detected, settled and sampled (the simulator's figures are 3 to 6 s).
	ExposureTime = 6 * time.Second
	// ResultTime: hearing a result and its verdict.
	ResultTime = 5 * time.Second
)

// SpeechRate is the rate at which the board speaks: espeak-ng's default of
// 175 words per minute (espeak-ng documentation, option -s).
const SpeechRate = 175

// SpeakingTime is how long text takes to say at SpeechRate.
func SpeakingTime(text string) time.Duration {
	words := len(strings.Fields(text))
	return time.Duration(float64(words) * 60 / SpeechRate * float64(time.Second))
}

// Bench is the bench's set-up as the prompts have left it, for estimates of
// the time a change takes.
type Bench map[string]string

// Change applies the settings of a prompt to the bench and returns the
// time a person needs to make them: the estimate of each setting that
// changes (a photometer move once for radius and angle together).
func (b Bench) Change(setup map[string]string) time.Duration {
	var d time.Duration
	moved := false
	for k, v := range setup {
		if cur, ok := b[k]; ok && cur == v {
			continue
		}
		b[k] = v
		switch k {
		case SetPhotometerRadius, SetPhotometerAngle, "position":
			if !moved {
				d += setupTimes[SetPhotometerRadius]
				moved = true
			}
		default:
			d += setupTimes[k]
		}
	}
	return d
}
