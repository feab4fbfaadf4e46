package compose

import (
	"bytes"
	"context"
	"errors"
	"strings"
	"testing"
	"time"

	"github.com/goccy/go-yaml"

	"kermalux/drivers/clock"
	"kermalux/firmware-host/panel/gpiopanel"
	"kermalux/firmware-host/panel/speech"
	"kermalux/procedures/catalog"
	"kermalux/procedures/panel"
)

var t0 = time.Date(2026, 3, 4, 9, 0, 0, 0, time.UTC)

func TestOpen(t *testing.T) {
	tests := []struct {
		name    string
		cfg     Config
		wantErr error
		wantMsg string
	}{
		// On this machine periph finds no GPIO pins.
		{"gpio without hardware", Config{Kind: KindGPIO, Config: gpioCfg("KERMALUX_NO_SUCH_PIN")}, panel.ErrNoHardware, "KERMALUX_NO_SUCH_PIN"},
		{"unknown kind", Config{Kind: "telepathy"}, nil, `"telepathy"`},
		{"terminal", Config{Kind: KindTerminal}, nil, ""},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			var out bytes.Buffer
			p, err := Open(tc.cfg, clock.NewManual(t0), Terminal{In: strings.NewReader("\n"), Out: &out}, nil)
			if tc.wantMsg == "" {
				if err != nil {
					t.Fatal(err)
				}
				defer p.Close()
				r, err := p.Ask(context.Background(), panel.Prompt{Message: panel.Message{Text: "Ready?"}})
				if err != nil || r.Answer != panel.Ack {
					t.Errorf("terminal Ask = %+v, %v", r, err)
				}
				if !strings.Contains(out.String(), "Ready?") {
					t.Errorf("prompt not shown: %q", out.String())
				}
				return
			}
			if err == nil || !strings.Contains(err.Error(), tc.wantMsg) {
				t.Fatalf("err = %v, want one mentioning %s", err, tc.wantMsg)
			}
			if tc.wantErr != nil && !errors.Is(err, tc.wantErr) {
				t.Errorf("err = %v, want it to wrap %v", err, tc.wantErr)
			}
		})
	}
}

func gpioCfg(sw string) gpiopanel.Config { return gpiopanel.Config{Switch: sw} }

func TestConfigFromYAML(t *testing.T) {
	src := `
kind: gpio
switch: GPIO17
switch_pull: up
debounce: 40ms
long_press: 2s
double_press: 400ms
ready_led: GPIO22
beam_led: GPIO23
fault_led: GPIO24
buzzer: GPIO25
speech: true
voice: en-gb
`
	var c Config
	if err := yaml.Unmarshal([]byte(src), &c); err != nil {
		t.Fatal(err)
	}
	if c.Kind != KindGPIO || c.Switch != "GPIO17" || c.Debounce != 40*time.Millisecond ||
		c.LongPress != 2*time.Second || c.DoublePress != 400*time.Millisecond ||
		c.Buzzer != "GPIO25" || !c.Speech || c.Voice != "en-gb" || c.FaultLED != "GPIO24" {
		t.Errorf("decoded %+v", c)
	}
}

// The bench's language chooses the espeak-ng voice: a bench voice of
// that language (a variant, a region) is kept, one of another language
// is replaced by the language's own (espeak-ng's voice names: de, fr,
// en-gb, with +variant; espeak-ng documentation, voices), and English
// keeps whatever the bench says.
func TestVoiceFor(t *testing.T) {
	de, err := catalog.Builtin("de")
	if err != nil {
		t.Fatal(err)
	}
	fr, err := catalog.Builtin("fr")
	if err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct {
		bench string
		c     *catalog.Catalog
		want  string
		over  bool
	}{
		{"", nil, "", false},
		{"en-gb", nil, "en-gb", false},
		{"", de, "de", false},
		{"en-gb", de, "de", true},
		{"de+f3", de, "de+f3", false},
		{"fr-be", fr, "fr-be", false},
		{"de", fr, "fr", true},
	} {
		var ear *speech.Ear
		if !tc.c.IsEnglish() {
			ear = speech.NewEar(tc.c)
		}
		got, over := VoiceFor(tc.bench, ear)
		if got != tc.want || over != tc.over {
			t.Errorf("VoiceFor(%q, %s) = %q, %v; want %q, %v", tc.bench, ear.Language(), got, over, tc.want, tc.over)
		}
	}
}

// A terminal panel opened for a German bench shows its own texts in
// German.
func TestOpenInBenchLanguage(t *testing.T) {
	de, err := catalog.Builtin("de")
	if err != nil {
		t.Fatal(err)
	}
	var out bytes.Buffer
	p, err := Open(Config{Kind: KindTerminal, Messages: de}, clock.NewManual(t0), Terminal{In: strings.NewReader("\n"), Out: &out}, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	if _, err := p.Ask(context.Background(), panel.Prompt{Message: panel.Message{Text: "Schürze an?"}}); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(out.String(), "Enter = erledigt") {
		t.Errorf("not German keys:\n%s", out.String())
	}
}
