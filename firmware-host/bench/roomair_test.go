package bench

import (
	"context"
	"errors"
	"math"
	"strings"
	"testing"
	"time"

	"periph.io/x/conn/v3/i2c"

	"kermalux/drivers/clock"
	"kermalux/drivers/filepos"
	"kermalux/drivers/roomair/airsim"
)

// The room-air entry: the bus and one of the chip's two addresses (0x76,
// 0x77: BST-BME280-DS002 rev. 1.6 section 6.2); anything else is refused at
// its line.
func TestRoomAirEntry(t *testing.T) {
	b, err := Parse("room2.yaml", []byte(goodBench+"room_air:\n  bus: \"1\"\n  address: 0x77\n"))
	if err != nil {
		t.Fatal(err)
	}
	if b.RoomAir == nil || b.RoomAir.Bus != "1" || b.RoomAir.Address != 0x77 {
		t.Fatalf("room_air %+v, want bus 1 at 0x77", b.RoomAir)
	}
	for _, c := range []struct {
		name, extra string
		line        int
		want        string
	}{
		{"address", "room_air:\n  bus: \"1\"\n  address: 0x42\n", 12, "room_air.address: 0x42"},
		{"no bus", "room_air:\n  address: 0x76\n", 11, "room_air: bus missing"},
	} {
		t.Run(c.name, func(t *testing.T) {
			_, err := Parse("room2.yaml", []byte(goodBench+c.extra))
			var fe *filepos.Error
			if !errors.As(err, &fe) || fe.Line != c.line || !strings.Contains(err.Error(), c.want) {
				t.Fatalf("error %v, want line %d with %q", err, c.line, c.want)
			}
		})
	}
}

// The bench opens the sensor on its bus, and Config hands it to the engine:
// the air read back is the simulated room's to the chip's resolution. A
// sensor that is not there leaves the values entered, with a warning.
func TestRoomAirConfig(t *testing.T) {
	clk := clock.NewManual(time.Date(2026, 6, 1, 9, 0, 0, 0, time.UTC))
	load := func(t *testing.T, addr string) *Bench {
		b, err := Load("../../testdata/bench/tollemby-rise-room2.yaml")
		if err != nil {
			t.Fatal(err)
		}
		b.RoomAir = &RoomAir{Bus: "1", Address: map[string]int{"low": 0x76, "high": 0x77}[addr]}
		return b
	}
	chip := airsim.New(airsim.Air{TemperatureC: 24.6, PressureKPa: 97.3, HumidityPct: 45})
	t.Run("found", func(t *testing.T) {
		b := load(t, "low")
		var opened string
		b.OpenI2C = func(bus string) (i2c.BusCloser, error) { opened = bus; return nopCloser{chip}, nil }
		p, err := b.Procedure("conversion-factor")
		if err != nil {
			t.Fatal(err)
		}
		cfg, err := b.Config(p, nil, nil, nil, clk, "test")
		if err != nil {
			t.Fatal(err)
		}
		if opened != "1" || cfg.RoomAir == nil {
			t.Fatalf("bus %q opened, sensor %v", opened, cfg.RoomAir)
		}
		a, err := cfg.RoomAir.Sense(context.Background())
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(a.TemperatureC-24.6) > 0.001 || math.Abs(a.PressureKPa-97.3) > 0.001 {
			t.Errorf("read %v °C, %v kPa, the room holds 24.6 °C, 97.3 kPa", a.TemperatureC, a.PressureKPa)
		}
	})
	t.Run("wrong address", func(t *testing.T) {
		b := load(t, "high") // the chip answers at 0x76 only
		b.OpenI2C = func(string) (i2c.BusCloser, error) { return nopCloser{chip}, nil }
		if _, _, err := b.OpenRoomAir(clk); err == nil || !strings.Contains(err.Error(), "address 0x77") {
			t.Fatalf("error %v, want one naming address 0x77", err)
		}
		p, _ := b.Procedure("conversion-factor")
		cfg, err := b.Config(p, nil, nil, nil, clk, "test")
		if err != nil {
			t.Fatal(err)
		}
		if cfg.RoomAir != nil || !strings.Contains(strings.Join(cfg.Warnings, " "), "room air sensor was not found") {
			t.Fatalf("sensor %v, warnings %q: want none and a warning", cfg.RoomAir, cfg.Warnings)
		}
	})
}

type nopCloser struct{ i2c.Bus }

func (nopCloser) Close() error { return nil }
