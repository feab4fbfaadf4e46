package roomair

import (
	"encoding/binary"
	"fmt"
)

// Calibration holds the trimming parameters a BMP280 or BME280 carries in
// its non-volatile memory, named as in the data sheets (dig_T1...dig_H6).
// Registers 0x88..0xA1 hold T1..P9 (little-endian 16-bit words) and H1
// (0xA1); a BME280 adds H2..H6 at 0xE1..0xE7 with H4 and H5 packed as
// 12-bit signed values (BME280 data sheet BST-BME280-DS002, rev. 1.6,
// section 4.2.2, table 16; BMP280 data sheet BST-BMP280-DS001, section
// 3.11.2, table 17).
type Calibration struct {
	T1                             uint16
	T2, T3                         int16
	P1                             uint16
	P2, P3, P4, P5, P6, P7, P8, P9 int16
	H1                             uint8
	H2                             int16
	H3                             uint8
	H4, H5                         int16
	H6                             int8
	HasHumidity                    bool
}

// ParseCalibration decodes the 26 bytes read from 0x88..0xA1 and, for a
// BME280, the 7 bytes read from 0xE1..0xE7 (nil for a BMP280).
func ParseCalibration(tp []byte, h []byte) (Calibration, error) {
	if len(tp) != 26 {
		return Calibration{}, fmt.Errorf("calibration block 0x88..0xA1: want 26 bytes, got %d", len(tp))
	}
	le := binary.LittleEndian
	s := func(i int) int16 { return int16(le.Uint16(tp[i:])) }
	c := Calibration{
		T1: le.Uint16(tp[0:]), T2: s(2), T3: s(4),
		P1: le.Uint16(tp[6:]), P2: s(8), P3: s(10), P4: s(12), P5: s(14), P6: s(16), P7: s(18), P8: s(20), P9: s(22),
		H1: tp[25],
	}
	if h == nil {
		return c, nil
	}
	if len(h) != 7 {
		return Calibration{}, fmt.Errorf("humidity calibration block 0xE1..0xE7: want 7 bytes, got %d", len(h))
	}
	c.HasHumidity = true
	c.H2 = int16(le.Uint16(h[0:]))
	c.H3 = h[2]
	// dig_H4: 0xE4 [11:4], 0xE5 [3:0]; dig_H5: 0xE6 [11:4], 0xE5 [7:4];
	// both signed 12-bit: the MSB register is read as a signed byte.
	c.H4 = int16(int8(h[3]))<<4 | int16(h[4]&0x0F)
	c.H5 = int16(int8(h[5]))<<4 | int16(h[4]>>4)
	c.H6 = int8(h[6])
	return c, nil
}

// Bytes is the inverse of ParseCalibration: the register contents that
// hold c (the simulated chip serves them).
func (c Calibration) Bytes() (tp []byte, h []byte) {
	tp = make([]byte, 26)
	le := binary.LittleEndian
	for i, v := range []uint16{c.T1, uint16(c.T2), uint16(c.T3), c.P1, uint16(c.P2), uint16(c.P3), uint16(c.P4),
		uint16(c.P5), uint16(c.P6), uint16(c.P7), uint16(c.P8), uint16(c.P9)} {
		le.PutUint16(tp[2*i:], v)
	}
	tp[25] = c.H1
	if !c.HasHumidity {
		return tp, nil
	}
	h = make([]byte, 7)
	le.PutUint16(h[0:], uint16(c.H2))
	h[2] = c.H3
	h[3] = byte(c.H4 >> 4)
	h[4] = byte(c.H4&0x0F) | byte(c.H5&0x0F)<<4
	h[5] = byte(c.H5 >> 4)
	h[6] = byte(c.H6)
	return tp, h
}

// Temperature is the compensated temperature in °C for the raw 20-bit
// value adcT, and t_fine, the fine temperature the pressure and humidity
// compensations use. It is the data sheets' double-precision formula
// (BMP280 BST-BMP280-DS001 section 8.1; the same in BME280
// BST-BME280-DS002 rev. 1.6 section 8.1):
//
//	var1   = (adc_T/16384 − T1/1024)·T2
//	var2   = (adc_T/131072 − T1/8192)²·T3
//	t_fine = (int32)(var1 + var2)
//	T      = (var1 + var2)/5120
func (c Calibration) Temperature(adcT int32) (celsius float64, tFine int32) {
	a := float64(adcT)
	v1 := (a/16384 - float64(c.T1)/1024) * float64(c.T2)
	d := a/131072 - float64(c.T1)/8192
	v2 := d * d * float64(c.T3)
	return (v1 + v2) / 5120, int32(v1 + v2)
}

// Pressure is the compensated pressure in Pa for the raw 20-bit value adcP
// at the fine temperature tFine, by the data sheets' double-precision
// formula (same sections as Temperature). ok is false where the data sheet
// returns 0 to avoid a division by zero.
func (c Calibration) Pressure(adcP int32, tFine int32) (pa float64, ok bool) {
	v1 := float64(tFine)/2 - 64000
	v2 := v1 * v1 * float64(c.P6) / 32768
	v2 += v1 * float64(c.P5) * 2
	v2 = v2/4 + float64(c.P4)*65536
	v1 = (float64(c.P3)*v1*v1/524288 + float64(c.P2)*v1) / 524288
	v1 = (1 + v1/32768) * float64(c.P1)
	if v1 == 0 {
		return 0, false
	}
	p := 1048576 - float64(adcP)
	p = (p - v2/4096) * 6250 / v1
	v1 = float64(c.P9) * p * p / 2147483648
	v2 = p * float64(c.P8) / 32768
	return p + (v1+v2+float64(c.P7))/16, true
}

// Humidity is the compensated relative humidity in % for the raw 16-bit
// value adcH at tFine, by the BME280 data sheet's double-precision formula
// (BST-BME280-DS002 rev. 1.6 section 8.1), clamped to 0..100 % as there.
func (c Calibration) Humidity(adcH int32, tFine int32) float64 {
	h := float64(tFine) - 76800
	h = (float64(adcH) - (float64(c.H4)*64 + float64(c.H5)/16384*h)) *
		(float64(c.H2) / 65536 * (1 + float64(c.H6)/67108864*h*(1+float64(c.H3)/67108864*h)))
	h *= 1 - float64(c.H1)*h/524288
	switch {
	case h > 100:
		return 100
	case h < 0:
		return 0
	}
	return h
}
