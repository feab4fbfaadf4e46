package gpiopanel

import (
	"fmt"
	"time"

	"periph.io/x/conn/v3/gpio"

	"kermalux/firmware-host/panel/speech"
)

// Config names the board's pins and sets the foot switch's timing. Pin
// names are periph names such as "GPIO17". Only Switch is required; an
// empty LED or buzzer name means that part is not fitted.
type Config struct {
	Switch string `yaml:"switch" json:"switch"`
	// SwitchPull is "up", "down" or "none"; empty chooses "up" for an
	// active-low switch (wired to ground) and "down" for an active-high one.
	SwitchPull string `yaml:"switch_pull" json:"switch_pull"`
	// SwitchActiveHigh: the switch reads high when pressed. The default is
	// a switch that connects the pin to ground (active low).
	SwitchActiveHigh bool `yaml:"switch_active_high" json:"switch_active_high"`

	// Debounce: a level must hold this long to count (default 30 ms);
	// contact bounces shorter than this are ignored.
	Debounce time.Duration `yaml:"debounce" json:"debounce"`
	// LongPress: a press held this long asks for a retake (default 1.5 s).
	LongPress time.Duration `yaml:"long_press" json:"long_press"`
	// DoublePress: a second short press starting within this time of the
	// first one's release asks for a pause; 0 turns double presses off (then
	// a short press is acknowledged as soon as it is released).
	DoublePress time.Duration `yaml:"double_press" json:"double_press"`
	// Poll is how often the switch is sampled (default 5 ms).
	Poll time.Duration `yaml:"poll" json:"poll"`

	ReadyLED     string `yaml:"ready_led" json:"ready_led"`
	BeamLED      string `yaml:"beam_led" json:"beam_led"`
	FaultLED     string `yaml:"fault_led" json:"fault_led"`
	LEDActiveLow bool   `yaml:"led_active_low" json:"led_active_low"`

	Buzzer          string `yaml:"buzzer" json:"buzzer"`
	BuzzerActiveLow bool   `yaml:"buzzer_active_low" json:"buzzer_active_low"`

	// Ear is the engineer's language (set by compose from the bench's):
	// what the voice says, in its words. nil: English.
	Ear *speech.Ear `yaml:"-" json:"-"`
}

// Defaults used for zero fields.
const (
	DefaultDebounce  = 30 * time.Millisecond
	DefaultLongPress = 1500 * time.Millisecond
	DefaultPoll      = 5 * time.Millisecond
)

// withDefaults fills zero fields and checks the timings make sense.
func (c Config) withDefaults() (Config, error) {
	if c.Switch == "" {
		return c, fmt.Errorf("gpio panel: no foot switch pin configured (switch: GPIOnn)")
	}
	if c.Debounce == 0 {
		c.Debounce = DefaultDebounce
	}
	if c.LongPress == 0 {
		c.LongPress = DefaultLongPress
	}
	if c.Poll == 0 {
		c.Poll = DefaultPoll
	}
	switch {
	case c.Debounce < 0 || c.LongPress < 0 || c.Poll < 0 || c.DoublePress < 0:
		return c, fmt.Errorf("gpio panel: negative time in config (debounce %v, long press %v, double press %v, poll %v)", c.Debounce, c.LongPress, c.DoublePress, c.Poll)
	case c.Poll > c.Debounce:
		return c, fmt.Errorf("gpio panel: poll %v is longer than debounce %v; the switch would be sampled too rarely", c.Poll, c.Debounce)
	case c.LongPress <= 2*c.Debounce:
		return c, fmt.Errorf("gpio panel: long press %v must be well above debounce %v", c.LongPress, c.Debounce)
	case c.DoublePress > 0 && c.DoublePress <= c.Debounce:
		return c, fmt.Errorf("gpio panel: double-press gap %v must be above debounce %v", c.DoublePress, c.Debounce)
	}
	return c, nil
}

func (c Config) pull() (gpio.Pull, error) {
	switch c.SwitchPull {
	case "":
		if c.SwitchActiveHigh {
			return gpio.PullDown, nil
		}
		return gpio.PullUp, nil
	case "up":
		return gpio.PullUp, nil
	case "down":
		return gpio.PullDown, nil
	case "none", "float":
		return gpio.Float, nil
	}
	return gpio.PullNoChange, fmt.Errorf("gpio panel: switch_pull %q: want up, down or none", c.SwitchPull)
}
