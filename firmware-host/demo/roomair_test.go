package demo

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"strings"
	"testing"

	"kermalux/drivers/clock"
	"kermalux/drivers/roomair"
	"kermalux/procedures/engine"
	"kermalux/procedures/entry"
)

// The same seeded session gives identical results (values, expanded
// uncertainties, budgets, verdicts) with the room-air sensor simulated at
// the scenario's air and with those values entered by the operator, when
// the bench states for its thermometer and barometer the sensor's own
// uncertainties (±1 °C, ±1 hPa rectangular: BST-BME280-DS002 rev. 1.6
// tables 1–2, from memory). The journal says which was used.
func TestSeededRoomAirSameAsEntered(t *testing.T) {
	if testing.Short() {
		t.Skip("two whole seeded sessions")
	}
	ctx := context.Background()
	scn := "../../testdata/scenarios/tollemby-rise-room2.yaml" // room_air 23.5 °C, 99.2 kPa
	sensed, err := Seeded(ctx, SeededOptions{Dir: t.TempDir(), Scenario: scn, RoomAir: true})
	if err != nil {
		t.Fatal(err)
	}
	entered, err := Seeded(ctx, SeededOptions{Dir: t.TempDir(), Scenario: scn, Config: func(cfg *engine.Config, _ clock.Clock) {
		cc := cfg.Correctors[engine.Dosimeter].(engine.CalibCorrector)
		cc.TemperatureUnc, cc.PressureUnc = roomair.TemperatureUnc, roomair.PressureUnc
		cfg.Correctors[engine.Dosimeter] = cc
	}})
	if err != nil {
		t.Fatal(err)
	}
	if sensed.Config.RoomAir == nil || entered.Config.RoomAir != nil {
		t.Fatalf("sensor configured %v / %v, want only in the first run", sensed.Config.RoomAir, entered.Config.RoomAir)
	}
	sources := func(o *SeededOutcome) map[string]entry.Value {
		envs, err := o.Journal.Envelopes(ctx, o.Summary.Session)
		if err != nil {
			t.Fatal(err)
		}
		out := map[string]entry.Value{}
		for _, e := range envs {
			if e.Kind != entry.KindValue {
				continue
			}
			var v entry.Value
			if err := json.Unmarshal(e.Payload, &v); err != nil {
				t.Fatal(err)
			}
			out[v.Name] = v
		}
		return out
	}
	s, e := sources(sensed), sources(entered)
	for name, want := range map[string]float64{"temperature": 23.5, "pressure": 99.2} {
		if s[name].Source != "sensor" || s[name].Value != want {
			t.Errorf("sensed run: %s %+v, want %v from the sensor", name, s[name], want)
		}
		if e[name].Source != "operator" || e[name].Value != want {
			t.Errorf("entered run: %s %+v, want %v entered", name, e[name], want)
		}
	}
	if len(sensed.Summary.Results) == 0 {
		t.Fatal("no results")
	}
	a, _ := json.Marshal(sensed.Summary.Results)
	b, _ := json.Marshal(entered.Summary.Results)
	if sensed.Summary.BeamOn != entered.Summary.BeamOn || sensed.Readings != entered.Readings {
		t.Errorf("the sensor changed the session: %d vs %d readings, beam-on %v vs %v", sensed.Readings, entered.Readings, sensed.Summary.BeamOn, entered.Summary.BeamOn)
	}
	// The sensed run asks two prompts fewer, so its clock runs behind by
	// their think time: least-squares fits over reading times (stability, residual
	// settling) then differ in the last bits of a float64. Every text
	// must be equal and every number equal to 1e-12 relative.
	var ja, jb any
	if err := json.Unmarshal(a, &ja); err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &jb); err != nil {
		t.Fatal(err)
	}
	worst := 0.0
	if path := sameJSON(ja, jb, "results", &worst); path != "" {
		t.Errorf("results differ at %s", path)
	}
	t.Logf("largest relative difference between the runs' numbers: %.2g", worst)
	if !strings.Contains(string(a), "k_TP") {
		t.Errorf("no k_TP rows in the budgets: the comparison would not see the air")
	}
}

// sameJSON compares two decoded JSON values, numbers to 1e-12 relative;
// it returns the path of the first difference ("" if none) and keeps the
// largest relative difference of numbers in worst.
func sameJSON(a, b any, path string, worst *float64) string {
	switch x := a.(type) {
	case map[string]any:
		y, ok := b.(map[string]any)
		if !ok || len(x) != len(y) {
			return path
		}
		for k, v := range x {
			if p := sameJSON(v, y[k], path+"."+k, worst); p != "" {
				return p
			}
		}
	case []any:
		y, ok := b.([]any)
		if !ok || len(x) != len(y) {
			return path
		}
		for i := range x {
			if p := sameJSON(x[i], y[i], fmt.Sprintf("%s[%d]", path, i), worst); p != "" {
				return p
			}
		}
	case float64:
		y, ok := b.(float64)
		if !ok {
			return path
		}
		d := math.Abs(x - y)
		if m := math.Max(math.Abs(x), math.Abs(y)); m > 0 {
			d /= m
		}
		*worst = math.Max(*worst, d)
		if d > 1e-12 {
			return fmt.Sprintf("%s: %v vs %v", path, x, y)
		}
	default:
		if a != b {
			return fmt.Sprintf("%s: %v vs %v", path, a, b)
		}
	}
	return ""
}
