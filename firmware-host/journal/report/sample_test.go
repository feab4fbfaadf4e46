package report

import (
	"encoding/json"
	"fmt"
	"math"
	"time"

	"kermalux/procedures/entry"
)

// The session built here is invented for tests and demos: Tollemby Rise
// Clinic, room 2, intensifier HV-2291, meters and laboratories that do not
// exist. Its numbers are plausible, not measured.

type sampleWriter struct {
	envs    []entry.Envelope
	seq     int64
	wall    time.Time
	mono    time.Duration
	session string
	beamOn  float64
}

func (w *sampleWriter) add(kind entry.Kind, payload any, advance time.Duration) int64 {
	w.seq++
	w.wall = w.wall.Add(advance)
	w.mono += advance
	b, err := json.Marshal(payload)
	if err != nil {
		panic(err)
	}
	w.envs = append(w.envs, entry.Envelope{Seq: w.seq, Session: w.session, Kind: kind, Wall: w.wall, Mono: w.mono, BootID: "3b1e6f0a-boot-0001", Payload: b})
	return w.seq
}

var sampleStart = time.Date(2026, 11, 18, 9, 2, 0, 0, time.UTC)

func sampleCerts() []entry.CertRef { return sampleCertsShifted(0) }

// sampleCertsShifted returns the sample certificates with their dates moved
// by d (for sessions of other years).
func sampleCertsShifted(d time.Duration) []entry.CertRef {
	cs := []entry.CertRef{
		{ID: "NCL-D-24117", Meter: "dosimeter", Model: "Veltrane KR-40", Serial: "KR40-1187", Laboratory: "Pelverton Calibration Laboratory",
			Calibrated: time.Date(2026, 3, 10, 0, 0, 0, 0, time.UTC), Due: time.Date(2027, 3, 10, 0, 0, 0, 0, time.UTC), Valid: true,
			SHA256: "5d0c8a41e7b29f36c1a4d8e0f2b7a9c3d6e1f4a7b0c3d6e9f2a5b8c1d4e7f0a3"},
		{ID: "NCL-P-24190", Meter: "photometer", Model: "Vessoric LM-9", Serial: "LM9-5521", Laboratory: "Pelverton Calibration Laboratory",
			Calibrated: time.Date(2025, 12, 1, 0, 0, 0, 0, time.UTC), Due: time.Date(2026, 12, 1, 0, 0, 0, 0, time.UTC), Valid: true,
			SHA256: "a1f3c5e7092b4d6f8a0c2e4f6b8d0a2c4e6f8b0d2a4c6e8f0b2d4a6c8e0f2b4d"},
	}
	for i := range cs {
		cs[i].Calibrated, cs[i].Due = cs[i].Calibrated.Add(d), cs[i].Due.Add(d)
	}
	return cs
}

// budget makes an uncertainty budget from relative standard uncertainties
// and returns it with the combined relative standard uncertainty (root sum
// of squares, JCGM 100:2008 5.1.6, for the generator's own use).
func budget(rows ...entry.BudgetRow) ([]entry.BudgetRow, float64) {
	var s float64
	for i := range rows {
		rows[i].Sensitivity = 1
		rows[i].Contribution = rows[i].RelStdUnc
		if rows[i].Value != 0 {
			rows[i].StdUnc = rows[i].RelStdUnc * math.Abs(rows[i].Value)
		}
		s += rows[i].RelStdUnc * rows[i].RelStdUnc
	}
	return rows, math.Sqrt(s)
}

// sampleSession returns the envelopes of an invented complete acceptance
// session with a retake after a lost photometer and a failing contrast
// ratio.
func sampleSession() []entry.Envelope {
	return sampleSessionAt(sampleStart, "hv2291-20261118-0902", 1, nil)
}

// sampleSessionAt is the sample session started at start with id, its
// conversion factors multiplied by gScale and, when baselines is not nil,
// those baselines (per field mode) recorded with them.
func sampleSessionAt(start time.Time, id string, gScale float64, baselines map[string]float64) []entry.Envelope {
	shift := start.Sub(sampleStart)
	w := &sampleWriter{wall: start, mono: 41 * time.Second, session: id}
	const of = 31
	step := 0
	startStep := func(id, kind, mode string) {
		step++
		w.add(entry.KindStep, entry.Step{Index: step, Of: of, ID: id, Kind: kind, FieldMode: mode, State: entry.StepStarted}, 2*time.Second)
	}
	doneStep := func(id, kind, mode string) {
		w.add(entry.KindStep, entry.Step{Index: step, Of: of, ID: id, Kind: kind, FieldMode: mode, State: entry.StepDone}, time.Second)
	}
	w.add(entry.KindSession, entry.Session{
		ID: w.session, Site: "Tollemby Rise Clinic", Room: "Room 2",
		IntensifierModel: "Meridel IX-32 (32/25/17 cm)", IntensifierSerial: "HV-2291",
		Engineer: "Service engineer (demo)", Procedure: "acceptance",
		ProcedureHash:   "9e4b2c7d1a0f3e5b8c6d4a2f0e1b3c5d7f9a8b6c4d2e0f1a3b5c7d9e8f6a4b2c",
		BenchHash:       "4c2a0e8f6d4b2a0c8e6f4d2b0a8c6e4f2d0b8a6c4e2f0d8b6a4c2e0f8d6b4a2c",
		SoftwareVersion: "0.1.0-dev",
		BoardKey:        "b7e1c04d9a2f6e3b8c5d0a7f4e1b9c6d3a0f7e4b1c8d5a2f9e6b3c0d7a4f1e8b",
		Started:         start, Certificates: sampleCertsShifted(shift),
	}, 0)

	// Pre-exposure safety checklist: each line acknowledged with a press.
	startStep("safety-checklist", "checklist", "")
	for i, line := range []string{
		"Lead apron and thyroid collar are on.",
		"Nobody else is in the room, or they are shielded.",
		"The door warning light is on.",
		"You are qualified and authorised to operate this unit.",
	} {
		ps := w.add(entry.KindPrompt, entry.Prompt{Step: step, Level: "info", Action: "check", Text: line, Asked: true}, 3*time.Second)
		w.add(entry.KindAck, entry.Ack{Step: step, PromptSeq: ps, Answer: "yes", Text: line, At: w.wall.Add(time.Duration(4+i) * time.Second)}, time.Duration(4+i)*time.Second)
	}
	doneStep("safety-checklist", "checklist", "")

	startStep("room-conditions", "enter", "")
	w.add(entry.KindValue, entry.Value{Step: step, Name: "temperature", Value: 23.5, Unit: "°C", Source: "operator"}, 9*time.Second)
	w.add(entry.KindValue, entry.Value{Step: step, Name: "pressure", Value: 100.4, Unit: "kPa", Source: "operator"}, 7*time.Second)
	doneStep("room-conditions", "enter", "")

	// k_TP = ((273.15+T)/(273.15+T0))·(P0/P), T0 = 20 °C as on the certificate.
	ktp := (273.15 + 23.5) / (273.15 + 20) * (101.325 / 100.4)
	const dosCoef, photCoef, dark = 1.012, 0.987, 0.012
	invSq := math.Pow(950.0/970.0, 2)
	kerma := func(mode, pos string, raw float64, used bool) entry.Reading {
		v := raw * dosCoef * ktp * invSq
		return entry.Reading{Step: step, StepID: "conversion-" + mode, FieldMode: mode, Meter: "dosimeter", Quantity: "air_kerma_rate",
			Raw: fmt.Sprintf("KR %.4f uGy/s OK", raw), RawValue: raw, RawUnit: "uGy/s", Value: v, Unit: "µGy/s", Status: "ok",
			Corrections: []entry.Correction{
				{Name: "calibration_coefficient", Factor: dosCoef, Note: "RQA5, HVL 7.1 mm Al, from certificate NCL-D-24117"},
				{Name: "k_tp", Factor: ktp, Note: "23.5 °C, 100.4 kPa; reference 20 °C, 101.325 kPa"},
				{Name: "inverse_square", Factor: invSq, Note: "chamber 950 mm, input plane 970 mm from the focal spot"},
			},
			Certificate: "NCL-D-24117", Calibrated: true, Mono: w.mono, Wall: w.wall, BootID: "3b1e6f0a-boot-0001", Used: used}
	}
	lum := func(stepID, mode, pos string, raw float64, used bool) entry.Reading {
		v := raw*photCoef - dark
		return entry.Reading{Step: step, StepID: stepID, FieldMode: mode, Position: pos, Meter: "photometer", Quantity: "luminance",
			Raw: fmt.Sprintf("L=%08.3f CD/M2", raw), RawValue: raw, RawUnit: "cd/m2", Value: v, Unit: "cd/m²", Status: "ok",
			Corrections: []entry.Correction{
				{Name: "calibration_coefficient", Factor: photCoef, Note: "illuminant A, from certificate NCL-P-24190"},
				{Name: "dark", Factor: 1, Offset: -dark, Note: "beam-off luminance, mean of 20 readings"},
			},
			Certificate: "NCL-P-24190", Calibrated: true, Mono: w.mono, Wall: w.wall, BootID: "3b1e6f0a-boot-0001", Used: used}
	}

	startStep("dark-photometer", "measure", "")
	for i := 0; i < 3; i++ {
		rd := lum("dark-photometer", "", "centre", 0.0121+0.0002*float64(i), false)
		rd.Value = rd.RawValue * photCoef
		rd.Corrections = rd.Corrections[:1]
		w.add(entry.KindReading, rd, time.Second)
	}
	doneStep("dark-photometer", "measure", "")

	modes := []struct {
		name      string
		k, g      float64
		baseline  float64
		verdict   string
		decidedBy string
	}{
		{"32cm", 0.452, 152.0, 168.0, "pass", "baseline: at least 0.80 of baseline"},
		{"25cm", 0.738, 93.1, 101.5, "pass", "baseline: at least 0.80 of baseline"},
		{"17cm", 1.61, 42.6, 47.9, "pass", "specification: at least 35 cd·m⁻²/(µGy·s⁻¹)"},
	}
	for mi := range modes {
		modes[mi].g *= gScale
		if b, ok := baselines[modes[mi].name]; ok {
			modes[mi].baseline = b
		}
	}
	for mi, m := range modes {
		id := "conversion-" + m.name
		startStep(id, "measure", m.name)
		prompt := w.add(entry.KindPrompt, entry.Prompt{Step: step, Level: "instruction", Action: "beam_on",
			Text: "Select the " + m.name + " field. Set 70 kV, manual mode. Press the switch, then step on the pedal.", Asked: true}, 2*time.Second)
		w.add(entry.KindAck, entry.Ack{Step: step, PromptSeq: prompt, Answer: "pressed", Text: "Press the switch, then step on the pedal.", At: w.wall.Add(6 * time.Second)}, 6*time.Second)
		w.beamOn += 0
		w.add(entry.KindEvent, entry.Event{Step: step, Name: "beam_on", BeamOn: w.beamOn}, 2*time.Second)
		if mi == 1 {
			w.beamOn += 3.1
			w.add(entry.KindEvent, entry.Event{Step: step, Name: "meter_lost", Detail: "photometer: no reading for 2 s (link down)", BeamOn: w.beamOn}, 3*time.Second)
			w.add(entry.KindEvent, entry.Event{Step: step, Name: "beam_off", BeamOn: w.beamOn}, 2*time.Second)
			w.add(entry.KindEvent, entry.Event{Step: step, Name: "meter_back", Detail: "photometer on its link again", BeamOn: w.beamOn}, 20*time.Second)
			w.add(entry.KindStep, entry.Step{Index: step, Of: of, ID: id, Kind: "measure", FieldMode: m.name, State: entry.StepRetake, Reason: "the photometer was lost"}, time.Second)
			w.add(entry.KindEvent, entry.Event{Step: step, Name: "beam_on", BeamOn: w.beamOn}, 8*time.Second)
		}
		// One settling pair not used, then five used pairs.
		w.add(entry.KindReading, kerma(m.name, "", m.k*0.93, false), time.Second)
		w.add(entry.KindReading, lum(id, m.name, "", (m.k*0.93*m.g*0.97+dark)/photCoef, false), 0)
		for i := 0; i < 5; i++ {
			jk := 1 + 0.004*math.Sin(float64(3*i+mi))
			jl := 1 + 0.003*math.Cos(float64(2*i+mi))
			rawK := m.k / (dosCoef * ktp * invSq) * jk
			w.add(entry.KindReading, kerma(m.name, "", rawK, true), 1200*time.Millisecond)
			w.add(entry.KindReading, lum(id, m.name, "", (m.k*jk*m.g*jl+dark)/photCoef, true), 0)
		}
		w.beamOn += 7.4 + float64(mi)
		w.add(entry.KindEvent, entry.Event{Step: step, Name: "beam_off", BeamOn: w.beamOn}, 2*time.Second)
		rows, rel := budget(
			entry.BudgetRow{Source: "photometer calibration coefficient", Type: "B", Value: photCoef, Unit: "1", RelStdUnc: 0.011},
			entry.BudgetRow{Source: "dosimeter calibration coefficient", Type: "B", Value: dosCoef, Unit: "1", RelStdUnc: 0.0125},
			entry.BudgetRow{Source: "air density correction k_TP", Type: "B", Value: ktp, Unit: "1", RelStdUnc: 0.0015},
			entry.BudgetRow{Source: "distance to the input plane", Type: "B", Value: 970, Unit: "mm", RelStdUnc: 0.0041},
			entry.BudgetRow{Source: "repeatability of luminance", Type: "A", Value: m.k * m.g, Unit: "cd/m²", RelStdUnc: 0.0013, DoF: 4},
			entry.BudgetRow{Source: "repeatability of air kerma rate", Type: "A", Value: m.k, Unit: "µGy/s", RelStdUnc: 0.0018, DoF: 4},
		)
		res := entry.Result{Step: step, Procedure: "acceptance", FieldMode: m.name, Quantity: "conversion_factor", Value: m.g,
			Unit: "cd·m⁻²/(µGy·s⁻¹)", StdUnc: m.g * rel, ExpUnc: 2 * m.g * rel, K: 2, Verdict: m.verdict, DecidedBy: m.decidedBy,
			Calibrated: true, Baseline: m.baseline, BaselineFrac: m.g / m.baseline, Budget: rows}
		w.add(entry.KindResult, res, time.Second)
		rowsK, relK := budget(
			entry.BudgetRow{Source: "dosimeter calibration coefficient", Type: "B", Value: dosCoef, Unit: "1", RelStdUnc: 0.0125},
			entry.BudgetRow{Source: "air density correction k_TP", Type: "B", Value: ktp, Unit: "1", RelStdUnc: 0.0015},
			entry.BudgetRow{Source: "repeatability of air kerma rate", Type: "A", Value: m.k, Unit: "µGy/s", RelStdUnc: 0.0018, DoF: 4},
		)
		w.add(entry.KindResult, entry.Result{Step: step, Procedure: "acceptance", FieldMode: m.name, Quantity: "input_kerma_rate", Value: m.k,
			Unit: "µGy/s", StdUnc: m.k * relK, ExpUnc: 2 * m.k * relK, K: 2, Verdict: "info", DecidedBy: "no limit: recorded for the trend",
			Calibrated: true, Budget: rowsK}, 0)
		doneStep(id, "measure", m.name)
	}

	// Uniformity over the 32 cm field: centre, 0.5 r and 0.9 r up, down,
	// left and right (9 positions).
	positions := []struct {
		label string
		frac  float64
	}{
		{"centre", 1}, {"up 0.5r", 0.962}, {"right 0.5r", 0.948}, {"down 0.5r", 0.955}, {"left 0.5r", 0.951},
		{"up 0.9r", 0.842}, {"right 0.9r", 0.806}, {"down 0.9r", 0.829}, {"left 0.9r", 0.781},
	}
	const centreL = 68.7
	lmin, lmax := math.Inf(1), math.Inf(-1)
	for i, p := range positions {
		id := fmt.Sprintf("uniformity-%d", i+1)
		startStep(id, "measure", "32cm")
		w.add(entry.KindPrompt, entry.Prompt{Step: step, Level: "instruction", Action: "move_photometer",
			Text: fmt.Sprintf("Move the photometer to position %d of 9: %s.", i+1, p.label), Asked: true}, 4*time.Second)
		w.add(entry.KindEvent, entry.Event{Step: step, Name: "beam_on", BeamOn: w.beamOn}, 8*time.Second)
		for j := 0; j < 2; j++ {
			l := centreL * p.frac * (1 + 0.002*float64(j-1))
			lmin, lmax = math.Min(lmin, l), math.Max(lmax, l)
			w.add(entry.KindReading, lum(id, "32cm", p.label, (l+dark)/photCoef, true), time.Second)
		}
		w.beamOn += 4.2
		w.add(entry.KindEvent, entry.Event{Step: step, Name: "beam_off", BeamOn: w.beamOn}, time.Second)
		doneStep(id, "measure", "32cm")
	}
	nu := (lmax - lmin) / (lmax + lmin)
	rowsU, relU := budget(
		entry.BudgetRow{Source: "repeatability of luminance", Type: "A", Value: centreL, Unit: "cd/m²", RelStdUnc: 0.021, DoF: 9},
		entry.BudgetRow{Source: "photometer linearity", Type: "B", Value: 1, Unit: "1", RelStdUnc: 0.035},
	)
	w.add(entry.KindResult, entry.Result{Step: step, Procedure: "acceptance", FieldMode: "32cm", Quantity: "non_uniformity", Value: nu,
		Unit: "1", StdUnc: nu * relU, ExpUnc: 2 * nu * relU, K: 2, Verdict: "pass", DecidedBy: "specification: at most 0.15",
		Calibrated: true, Budget: rowsU}, time.Second)

	// Contrast ratio: centre luminance without and with the lead disk.
	startStep("contrast-open", "measure", "32cm")
	w.add(entry.KindEvent, entry.Event{Step: step, Name: "beam_on", BeamOn: w.beamOn}, 6*time.Second)
	for j := 0; j < 3; j++ {
		w.add(entry.KindReading, lum("contrast-open", "32cm", "centre", (centreL*(1+0.001*float64(j))+dark)/photCoef, true), time.Second)
	}
	w.beamOn += 5.0
	w.add(entry.KindEvent, entry.Event{Step: step, Name: "beam_off", BeamOn: w.beamOn}, time.Second)
	doneStep("contrast-open", "measure", "32cm")
	startStep("contrast-disk", "measure", "32cm")
	w.add(entry.KindPrompt, entry.Prompt{Step: step, Level: "instruction", Action: "lead_disk_in",
		Text: "Place the lead disk at the centre of the input.", Asked: true}, 3*time.Second)
	w.add(entry.KindEvent, entry.Event{Step: step, Name: "beam_on", BeamOn: w.beamOn}, 9*time.Second)
	const cr = 13.6
	for j := 0; j < 3; j++ {
		w.add(entry.KindReading, lum("contrast-disk", "32cm", "centre", (centreL/cr*(1+0.004*float64(j))+dark)/photCoef, true), time.Second)
	}
	w.beamOn += 5.6
	w.add(entry.KindEvent, entry.Event{Step: step, Name: "beam_off", BeamOn: w.beamOn}, time.Second)
	rowsC, relC := budget(
		entry.BudgetRow{Source: "repeatability, open field", Type: "A", Value: centreL, Unit: "cd/m²", RelStdUnc: 0.0006, DoF: 2},
		entry.BudgetRow{Source: "repeatability, lead disk", Type: "A", Value: centreL / cr, Unit: "cd/m²", RelStdUnc: 0.0023, DoF: 2},
		entry.BudgetRow{Source: "stray light at the photometer", Type: "B", Value: 0, Unit: "cd/m²", RelStdUnc: 0.012},
	)
	w.add(entry.KindResult, entry.Result{Step: step, Procedure: "acceptance", FieldMode: "32cm", Quantity: "contrast_ratio", Value: cr,
		Unit: "1", StdUnc: cr * relC, ExpUnc: 2 * cr * relC, K: 2, Verdict: "fail", DecidedBy: "specification: at least 15",
		Calibrated: true, Flags: []string{"below specification"}, Budget: rowsC}, time.Second)
	doneStep("contrast-disk", "measure", "32cm")

	w.add(entry.KindSessionEnd, entry.SessionEnd{Finished: w.wall.Add(40 * time.Second), BeamOn: w.beamOn, Steps: of, Outcome: "complete", Review: 1}, 40*time.Second)
	return w.envs
}

// sampleHistory returns yearly conversion factor results of HV-2291 in its
// 32 cm field falling on the straight line g0 + slope·t (t in years since
// the first session), one session a year from 2020.
func sampleHistory(n int, g0, slope float64) []HistoryPoint {
	var hs []HistoryPoint
	origin := time.Date(2020, 11, 12, 10, 0, 0, 0, time.UTC)
	for i := 0; i < n; i++ {
		d := origin.Add(time.Duration(float64(i) * yearDays * 24 * float64(time.Hour)))
		v := g0 + slope*float64(i)
		verdict := "pass"
		if v < 0.8*g0 {
			verdict = "fail"
		}
		hs = append(hs, HistoryPoint{Session: fmt.Sprintf("hv2291-%d", d.Year()), Date: d, Site: "Tollemby Rise Clinic", Room: "Room 2",
			Result: entry.Result{Quantity: "conversion_factor", FieldMode: "32cm", Value: v, Unit: "cd·m⁻²/(µGy·s⁻¹)",
				ExpUnc: 0.035 * v, K: 2, Verdict: verdict, Calibrated: true}})
	}
	return hs
}

// compactSession is the sample session cut to one step of each shape, for
// fuzz targets whose cost grows with the records: the checklist, the room
// conditions, the photometer's dark, two conversion-factor steps (the
// second with its retake), the first and last uniformity positions (the
// last carries the non-uniformity result), the contrast pair, and the
// session's end; at most one reading, prompt and acknowledgement per step
// and two events (beam on, beam off). Every kind of record and every
// quantity of result is still in it (57 records instead of 166).
func compactSession() []entry.Envelope {
	keep := map[int]bool{1: true, 2: true, 3: true, 4: true, 5: true, 7: true, 15: true, 16: true, 17: true}
	limit := map[entry.Kind]int{entry.KindReading: 1, entry.KindPrompt: 1, entry.KindAck: 1, entry.KindEvent: 2}
	type stepKind struct {
		step int
		kind entry.Kind
	}
	seen := map[stepKind]int{}
	var out []entry.Envelope
	for _, e := range sampleSession() {
		var p struct {
			Step  int `json:"step"`
			Index int `json:"index"`
		}
		if err := json.Unmarshal(e.Payload, &p); err != nil {
			panic(fmt.Sprintf("sample record %d: %v", e.Seq, err))
		}
		step := p.Step
		if e.Kind == entry.KindStep {
			step = p.Index
		}
		if step != 0 && !keep[step] {
			continue
		}
		if n, ok := limit[e.Kind]; ok {
			k := stepKind{step, e.Kind}
			if seen[k]++; seen[k] > n {
				continue
			}
		}
		e.Seq = int64(len(out) + 1)
		out = append(out, e)
	}
	return out
}
