package bench

import (
	"fmt"
	"log/slog"
	"sync"

	"periph.io/x/conn/v3/i2c"
	"periph.io/x/conn/v3/i2c/i2creg"
	"periph.io/x/host/v3"

	"kermalux/drivers/clock"
	"kermalux/drivers/roomair"
	"kermalux/procedures/engine"
)

// RoomAir is the bench's room-air sensor (optional): a BMP280 or BME280 on
// the board's I2C bus (drivers/roomair, ROOMAIR.md). With it, the
// procedure's temperature and pressure (source: sensor) are read, not
// entered; without it, or when it fails, they are entered.
type RoomAir struct {
	// Bus is the I2C bus as periph names it: "1", "I2C1" or "/dev/i2c-1".
	Bus string `yaml:"bus"`
	// Address is 0x76 (SDO to ground) or 0x77 (SDO to 3.3 V).
	Address int `yaml:"address"`
}

// OpenI2C opens an I2C bus by name; Bench.OpenI2C replaces it (the demo's
// simulated chip). The default initialises periph's host drivers once and
// opens the bus through its registry.
func defaultOpenI2C(name string) (i2c.BusCloser, error) {
	hostOnce.Do(func() { _, hostErr = host.Init() })
	if hostErr != nil {
		return nil, fmt.Errorf("periph host drivers: %w", hostErr)
	}
	return i2creg.Open(name)
}

var (
	hostOnce sync.Once
	hostErr  error
)

func (b *Bench) checkRoomAir(c *checker) {
	a := b.RoomAir
	if a == nil {
		return
	}
	if a.Bus == "" {
		c.errf([]any{"room_air"}, "bus missing: give the I2C bus (\"1\" for /dev/i2c-1)")
	}
	c.text([]any{"room_air", "bus"}, a.Bus)
	if a.Address != roomair.AddrLow && a.Address != roomair.AddrHigh {
		c.errf([]any{"room_air", "address"}, "0x%02X: a BMP280 or BME280 answers at 0x76 (SDO to ground) or 0x77 (SDO to 3.3 V)", a.Address)
	}
}

// OpenRoomAir opens the bench's room-air sensor: nil, nil when the bench
// names none. The bus is closed by close (nil when nothing was opened).
func (b *Bench) OpenRoomAir(clk clock.Clock) (s *roomair.Sensor, closeBus func() error, err error) {
	a := b.RoomAir
	if a == nil {
		return nil, nil, nil
	}
	open := b.OpenI2C
	if open == nil {
		open = defaultOpenI2C
	}
	bus, err := open(a.Bus)
	if err != nil {
		return nil, nil, fmt.Errorf("bench %s: room_air: I2C bus %q: %w", b.Path, a.Bus, err)
	}
	s, err = roomair.Open(&i2c.Dev{Bus: bus, Addr: uint16(a.Address)}, clk, engine.RoomAir)
	if err != nil {
		_ = bus.Close()
		return nil, nil, fmt.Errorf("bench %s: room_air: bus %q address 0x%02X: %w", b.Path, a.Bus, a.Address, err)
	}
	return s, bus.Close, nil
}

// roomAirFor is Config's room-air sensor: the sensor, or nil and the
// problem to say aloud (the values are then entered). The bus stays open
// for the process (one session per run of the board).
func (b *Bench) roomAirFor(clk clock.Clock) (engine.AirSensor, []string) {
	s, _, err := b.OpenRoomAir(clk)
	if err != nil {
		slog.Warn("room air sensor not opened", "err", err)
		return nil, []string{"The room air sensor was not found. Room temperature and pressure will be entered by hand."}
	}
	if s == nil {
		return nil, nil
	}
	return s, nil
}
