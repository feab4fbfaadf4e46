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
