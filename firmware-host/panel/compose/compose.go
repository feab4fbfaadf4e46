// Package compose builds the panel a bench asks for: the board's GPIO panel
// with speech, or a terminal panel with optional speech, from one Config
// (the bench file maps onto it).
package compose

import (
	"fmt"
	"io"
	"log/slog"
	"os"
	"strings"

	"kermalux/drivers/clock"
	"kermalux/firmware-host/panel/gpiopanel"
	"kermalux/firmware-host/panel/speech"
	"kermalux/firmware-host/panel/termpanel"
	"kermalux/procedures/catalog"
	"kermalux/procedures/panel"
)

// Kinds of panel.
const (
	KindGPIO     = "gpio"
	KindTerminal = "terminal"
)

// Config chooses and sets up a panel. The GPIO fields (pins, debounce, long
// press, ...) matter only for Kind "gpio".
type Config struct {
	Kind             string `yaml:"kind" json:"kind"` // "gpio" or "terminal"
	gpiopanel.Config `yaml:",inline" json:",inline"`
	Speech           bool   `yaml:"speech" json:"speech"` // speak prompts through espeak-ng
	Voice            string `yaml:"voice" json:"voice"`   // espeak-ng voice, e.g. "en-gb"
	SpeechRate       int    `yaml:"speech_rate" json:"speech_rate"`
	// Messages is the engineer's language (the bench's, set when the bench
	// is read): the panel's own texts, and what the voice says, in its
	// words and with its espeak-ng voice. nil: English.
	Messages *catalog.Catalog `yaml:"-" json:"-"`
}

// VoiceFor is the espeak-ng voice that speaks lang: the bench's voice
// when it is one of that language ("de", "de+f3", "fr-be" for "de" or
// "fr"), else the language's own (the catalog's voice). For English the
// bench's voice is used as it is. Overridden reports that the bench named
// a voice of another language, which is not used.
func VoiceFor(benchVoice string, ear *speech.Ear) (voice string, overridden bool) {
	lv := ear.Voice()
	if lv == "" {
		return benchVoice, false
	}
	if benchVoice == "" {
		return lv, false
	}
	code := strings.ToLower(benchVoice)
	if i := strings.IndexAny(code, "-+_"); i >= 0 {
		code = code[:i]
	}
	if code == strings.SplitN(ear.Language(), "-", 2)[0] {
		return benchVoice, false
	}
	return lv, true
}

// Terminal is where a terminal panel reads and writes; zero means standard
// input and output.
type Terminal struct {
	In  io.Reader
	Out io.Writer
}

// Open builds the panel cfg describes. When speech is wanted but espeak-ng
// is missing, the panel works without it (the GPIO panel then marks prompts
// with a chirp) and a warning is logged. On a machine without the GPIO pins
// a "gpio" panel fails with an error wrapping panel.ErrNoHardware.
func Open(cfg Config, clk clock.Clock, term Terminal, log *slog.Logger) (panel.Panel, error) {
	if log == nil {
		log = slog.Default()
	}
	if clk == nil {
		clk = clock.NewReal()
	}
	var ear *speech.Ear
	if !cfg.Messages.IsEnglish() {
		ear = speech.NewEar(cfg.Messages)
	}
	var voice *speech.Queue
	if cfg.Speech {
		v, overridden := VoiceFor(cfg.Voice, ear)
		if overridden {
			log.Warn("the bench's voice is not of its language; speaking with the language's", "voice", cfg.Voice, "language", ear.Language(), "using", v)
		}
		es, err := speech.FindEspeak(v, cfg.SpeechRate)
		if err != nil {
			log.Warn("speech off", "err", err)
		} else {
			voice = speech.NewQueue(es, 0, log)
		}
	}
	closeVoice := func() {
		if voice != nil {
			voice.Close()
		}
	}
	switch cfg.Kind {
	case KindGPIO:
		var v gpiopanel.Voice
		if voice != nil {
			v = voice
		}
		gc := cfg.Config
		gc.Ear = ear
		p, err := gpiopanel.New(gc, clk, v, log)
		if err != nil {
			closeVoice()
			return nil, err
		}
		p.Beep(gpiopanel.BeepReady)
		return p, nil
	case KindTerminal, "":
		var v termpanel.Voice
		if voice != nil {
			v = voice
		}
		if term.In == nil && term.Out == nil {
			return termpanel.NewStdio(clk, v, ear), nil
		}
		in, out := term.In, term.Out
		if in == nil {
			in = os.Stdin
		}
		if out == nil {
			out = os.Stdout
		}
		return termpanel.New(in, out, termpanel.Options{Clock: clk, Voice: v, Ear: ear}), nil
	}
	closeVoice()
	return nil, fmt.Errorf("panel kind %q: want %q or %q", cfg.Kind, KindGPIO, KindTerminal)
}
