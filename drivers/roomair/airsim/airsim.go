// Package airsim is a simulated BMP280/BME280 on a fake I2C bus: a
// register file with the chip id, trimming parameters and data registers,
// which answers register reads and writes as the chip does (auto-increment
// on burst reads, a forced conversion on a write of mode 01 to ctrl_meas).
// The raw values it serves are found by inverting the data sheet's
// compensation for the air it is given, so the driver in package roomair
// reads that air back to within the chip's resolution. It implements
// periph's i2c.Bus; the bench simulator and the tests open roomair over it.
package airsim

import (
	"fmt"
	"sync"

	"periph.io/x/conn/v3/physic"

	"kermalux/drivers/roomair"
)

// ExampleCalibration is the trimming parameter set of the BMP280 data
// sheet's worked example (BST-BMP280-DS001, section 3.12) for temperature
// and pressure, with humidity parameters typical of a BME280 (invented for
// the simulator).
var ExampleCalibration = roomair.Calibration{
	T1: 27504, T2: 26435, T3: -1000,
	P1: 36477, P2: -10685, P3: 3024, P4: 2855, P5: 140, P6: -7, P7: 15500, P8: -14600, P9: 6000,
	H1: 75, H2: 362, H3: 0, H4: 333, H5: 0, H6: 30, HasHumidity: true,
}

// Chip is a simulated sensor on its own bus.
type Chip struct {
	mu   sync.Mutex
	Addr uint16
	ID   byte
	Cal  roomair.Calibration
	regs [256]byte
	air  Air
	busy int // status reads left with the measuring bit set
	// BusyReads is how many status reads after a forced start report the
	// conversion as still running (0: done at once).
	BusyReads int
	// Fail makes every transaction fail with this error (a pulled sensor).
	Fail         error
	Transactions int // transactions served
}

// Air is what the simulated room holds.
type Air struct {
	TemperatureC, PressureKPa, HumidityPct float64
}

// New returns a BME280 (id 0x60) at roomair.AddrLow with
// ExampleCalibration, holding air.
func New(air Air) *Chip {
	c := &Chip{Addr: roomair.AddrLow, ID: roomair.ChipBME280, Cal: ExampleCalibration}
	c.Set(air)
	return c
}

// Set changes the room's air; the next forced conversion reads it.
func (c *Chip) Set(a Air) {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.air = a
}

func (c *Chip) load() {
	c.regs[0xD0] = c.ID
	tp, h := c.Cal.Bytes()
	copy(c.regs[0x88:], tp)
	if h != nil && c.ID == roomair.ChipBME280 {
		copy(c.regs[0xE1:], h)
	}
}

// Tx implements i2c.Bus.
func (c *Chip) Tx(addr uint16, w, r []byte) error {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.Transactions++
	if c.Fail != nil {
		return c.Fail
	}
	if addr != c.Addr {
		return fmt.Errorf("airsim: no device at address 0x%02X (the chip is at 0x%02X)", addr, c.Addr)
	}
	if c.regs[0xD0] == 0 {
		c.load()
	}
	if len(w) == 0 {
		return fmt.Errorf("airsim: a transaction without a register address")
	}
	reg := int(w[0])
	for i, v := range w[1:] {
		c.store(reg+i, v)
	}
	for i := range r {
		a := reg + i
		if a > 0xFF {
			return fmt.Errorf("airsim: read past register 0xFF")
		}
		if a == 0xF3 {
			if c.busy > 0 {
				c.busy--
				c.regs[0xF3] |= 0x08
			} else {
				c.regs[0xF3] &^= 0x08
			}
		}
		r[i] = c.regs[a]
	}
	return nil
}

func (c *Chip) store(reg int, v byte) {
	switch reg {
	case 0xE0:
		if v == 0xB6 {
			c.regs = [256]byte{}
			c.load()
		}
		return
	case 0xF4:
		c.regs[0xF4] = v
		if v&0x03 == 0x01 || v&0x03 == 0x02 {
			c.convert()
			c.regs[0xF4] = v &^ 0x03 // forced: back to sleep when done
			c.busy = c.BusyReads
		}
		return
	case 0xF2, 0xF5:
		c.regs[reg] = v
	}
}

// convert places the raw values of the current air in 0xF7..0xFE.
func (c *Chip) convert() {
	t, p, h := Raw(c.Cal, c.air)
	c.regs[0xF7], c.regs[0xF8], c.regs[0xF9] = byte(p>>12), byte(p>>4), byte(p<<4)
	c.regs[0xFA], c.regs[0xFB], c.regs[0xFC] = byte(t>>12), byte(t>>4), byte(t<<4)
	if c.ID == roomair.ChipBME280 {
		c.regs[0xFD], c.regs[0xFE] = byte(h>>8), byte(h)
	}
}

// Raw finds the raw 20-bit temperature and pressure and 16-bit humidity
// values whose compensation by cal is nearest to a (each compensation is
// monotonic in its raw value: a bisection finds it).
func Raw(cal roomair.Calibration, a Air) (adcT, adcP, adcH int32) {
	adcT = bisect(0, 1<<20-1, func(x int32) float64 { t, _ := cal.Temperature(x); return t }, a.TemperatureC)
	_, fine := cal.Temperature(adcT)
	adcP = bisect(0, 1<<20-1, func(x int32) float64 { p, _ := cal.Pressure(x, fine); return -p }, -a.PressureKPa*1000)
	if cal.HasHumidity {
		adcH = bisect(0, 1<<16-1, func(x int32) float64 { return cal.Humidity(x, fine) }, a.HumidityPct)
	}
	return adcT, adcP, adcH
}

// bisect returns the x in [lo, hi] whose f(x), increasing in x, is nearest
// to want.
func bisect(lo, hi int32, f func(int32) float64, want float64) int32 {
	for hi-lo > 1 {
		mid := lo + (hi-lo)/2
		if f(mid) < want {
			lo = mid
		} else {
			hi = mid
		}
	}
	if want-f(lo) <= f(hi)-want {
		return lo
	}
	return hi
}

// String implements i2c.Bus.
func (c *Chip) String() string { return fmt.Sprintf("airsim(0x%02X)", c.Addr) }

// Close implements i2c.BusCloser (the simulated bus holds nothing).
func (c *Chip) Close() error { return nil }

// SetSpeed implements i2c.Bus.
func (c *Chip) SetSpeed(physic.Frequency) error { return nil }
