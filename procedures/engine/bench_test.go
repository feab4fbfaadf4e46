package engine

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"sort"
	"testing"
	"time"

	"kermalux/drivers"
	"kermalux/drivers/benchsim"
	"kermalux/drivers/clock"
	"kermalux/drivers/units"
	"kermalux/firmware-host/panel/scripted"
	"kermalux/procedures/entry"
	"kermalux/procedures/panel"
)

// simMeter reads the bench simulator's physics model in-process; Read
// advances the manual clock to the meter's next sample time.
type simMeter struct {
	role   string
	m      *benchsim.Model
	clk    *clock.Manual
	period time.Duration
	next   time.Duration
	phase  time.Duration
}

func (s *simMeter) Read(ctx context.Context) (drivers.Reading, error) {
	if err := ctx.Err(); err != nil {
		return drivers.Reading{}, err
	}
	now := s.clk.Mono()
	if s.next <= now {
		s.next = (now/s.period+1)*s.period + s.phase
	}
	s.clk.Advance(s.next - now)
	t := s.next
	s.next += s.period
	q := units.AirKermaRate
	v := s.m.DoseReading(t).Value
	if s.role == Photometer {
		q, v = units.Luminance, s.m.LumReading(t).Value
	}
	return drivers.Reading{Meter: s.role, Quantity: q, Value: v, Unit: units.Canonical(q), RawValue: v, Status: drivers.StatusOK, Mono: t, Wall: s.clk.Now()}, nil
}

func (s *simMeter) Close() error { return nil }

// settleOracle is the time after beam-on at which the noise-free meters'
// kerma rate and L/K ratio come, and stay, within tol of their settled
// values: the physics' own settling time (ABC time constant and both
// meters' response), from the model's Truth.
func settleOracle(scn *benchsim.Scenario, tol float64) time.Duration {
	m, err := benchsim.NewModel(scn)
	if err != nil {
		panic(err)
	}
	m.SetBeam(0, true)
	const dt = 10 * time.Millisecond
	var ks, gs []float64
	for t := dt; t <= 30*time.Second; t += dt {
		tr := m.Truth(t)
		ks = append(ks, tr.DosimeterLagged)
		gs = append(gs, (tr.PhotometerLagged-tr.DarkLuminance)/tr.DosimeterLagged)
	}
	kEnd, gEnd := ks[len(ks)-1], gs[len(gs)-1]
	last := 0
	for i := range ks {
		if math.Abs(ks[i]/kEnd-1) > tol || math.Abs(gs[i]/gEnd-1) > tol {
			last = i + 1
		}
	}
	return time.Duration(last+1) * dt
}

// BenchmarkBeamOnPerReading: beam-on seconds per accepted conversion
// factor reading on the demo scenario, its brightness control rising from
// 30 % with time constants from 0.2 s to 2.5 s, against the oracle
// minimum and a fixed 10-second hold.
//
// The oracle minimum is the time for the noise-free meters' kerma rate and
// L/K ratio to come within 0.1 % of their settled values (settleOracle,
// from the model's Truth) plus the samples the noise makes necessary: for
// a mean of n independent readings with relative standard deviation
// u_rel, U = k·u_rel/√n, so reaching the type A target e needs
// n = (k·u_rel/e)² (JCGM 100:2008 4.2.3 with 6.2.1, k = 2), read at the
// meters' rate. u_rel of one L/K pair combines both meters' relative
// noise and quantum noise (relative variances add, 5.1.6).
func BenchmarkBeamOnPerReading(b *testing.B) {
	for _, rise := range []time.Duration{200 * time.Millisecond, 500 * time.Millisecond, time.Second, 1500 * time.Millisecond, 2500 * time.Millisecond} {
		b.Run(fmt.Sprintf("rise=%s", rise), func(b *testing.B) { benchBeamOn(b, rise) })
	}
}

func benchBeamOn(b *testing.B, rise time.Duration) {
	scn, err := benchsim.LoadScenario("../../testdata/scenarios/tollemby-rise-room2.yaml")
	if err != nil {
		b.Fatal(err)
	}
	scn.Intensifier.Brightness.TimeConstant = rise
	const target = 0.01
	const period = 100 * time.Millisecond
	var beamS, accepted float64
	for i := 0; i < b.N; i++ {
		scn.Seed = int64(1000 + i)
		model, err := benchsim.NewModel(scn)
		if err != nil {
			b.Fatal(err)
		}
		clk := clock.NewManual(time.Date(2026, 3, 4, 9, 0, 0, 0, time.UTC))
		pan := scripted.New(clk, scripted.WithThinkTime(300*time.Millisecond), scripted.WithResponder(func(p panel.Prompt) panel.Response {
			if p.Action == panel.ActBeamOn {
				model.SetBeam(clk.Mono()+500*time.Millisecond, true)
			}
			return scripted.AckAll(p)
		}), scripted.OnSay(func(m panel.Message) {
			if m.Action == panel.ActBeamOff {
				model.SetBeam(clk.Mono()+300*time.Millisecond, false)
			}
		}))
		steps := cfSteps()
		steps[5].Measure.Precision = target
		jr := newMemJournal(clk)
		cfg := Config{
			Procedure: Procedure{Name: "bench", Steps: steps},
			Meters: map[string]drivers.Meter{
				Dosimeter:  &simMeter{role: Dosimeter, m: model, clk: clk, period: period},
				Photometer: &simMeter{role: Photometer, m: model, clk: clk, period: period, phase: period / 2},
			},
			Panel: pan, Journal: jr, Clock: clk, Settings: DefaultSettings(), ReadInTurn: true,
		}
		e, err := New(cfg)
		if err != nil {
			b.Fatal(err)
		}
		sum, err := e.Run(context.Background())
		if err != nil {
			b.Fatal(err)
		}
		for _, ev := range records[entry.Event](jr, sum.Session, entry.KindEvent) {
			if ev.Name != evMeasured {
				continue
			}
			var p positionStats
			_ = json.Unmarshal([]byte(ev.Detail), &p)
			if p.Step == "cf@32cm" {
				beamS += p.BeamOnS
				accepted++
			}
		}
	}
	// Quantum noise at the settled 32 cm kerma rate (the Truth at t=0 has
	// no beam): recompute with the mode's rate.
	m, _ := benchsim.NewModel(scn)
	m.SetBeam(0, true)
	tr := m.Truth(20 * time.Second)
	uRel := math.Sqrt(sq(tr.Dosimeter.Noise) + sq(tr.Photometer.Noise) + sq(tr.DosimeterQuantumNoise) + sq(tr.PhotometerQuantumNoise))
	n := math.Max(2, math.Ceil(sq(2*uRel/target))) // at least two readings for any type A estimate
	oracle := settleOracle(scn, 0.001).Seconds() + n*period.Seconds()
	per := beamS / accepted
	b.ReportMetric(per, "beam_s/reading")
	b.ReportMetric(oracle, "oracle_min_s")
	b.ReportMetric(per/oracle, "x_oracle")
	b.ReportMetric(per/10, "x_fixed10s")
}

func sq(x float64) float64 { return x * x }

// BenchmarkSettledSeries: the cost of one settling judgement of one
// series of 120 readings (the most a fit looks at), beside sorting the
// same number of values in the same run: the engine makes three of them
// five times a second of signal.
func BenchmarkSettledSeries(b *testing.B) {
	xs := make([]timedValue, maxFit)
	vals := make([]float64, maxFit)
	for i := range xs {
		t := time.Duration(i) * 100 * time.Millisecond
		xs[i] = timedValue{t, 1 + 0.3*math.Exp(-t.Seconds()/0.8) + 0.01*math.Sin(float64(i)*1.7)}
		vals[i] = xs[i].v
	}
	b.Run("settled", func(b *testing.B) {
		for i := 0; i < b.N; i++ {
			settledSeries(xs, 0.005, 5)
		}
	})
	b.Run("baseline-sort", func(b *testing.B) {
		w := make([]float64, len(vals))
		for i := 0; i < b.N; i++ {
			copy(w, vals)
			sort.Float64s(w)
		}
	})
}
