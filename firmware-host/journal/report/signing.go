package report

import (
	"fmt"
	"sort"
	"strings"

	"kermalux/calib"
	"kermalux/procedures/entry"
)

// infoTable is one block of what a physicist needs before signing: a
// title, sentences, and a table. The HTML and the PDF render the same
// blocks, so the two say the same.
type infoTable struct {
	Title string
	Intro []string
	Head  []string
	Right []bool // right-aligned (numeric) columns
	Rows  [][]string
	Notes []string
}

// notStated is what the report prints for what the bench file did not say.
const notStated = "not stated in the bench file"

// signing builds the blocks that say what was tested, with what, how and
// against what: the test and the X-ray system, the meters, the beam
// quality, the geometry, the set-up per step, the formulas and every
// limit with its margin.
func (r *Report) signing(w *words) []infoTable {
	return []infoTable{r.testTable(w), r.meterTable(), r.beamTable(), r.geometryTable(), r.setupTable(), formulaTable(), r.limitTable(w)}
}

func orNotStated(parts ...string) string {
	var ps []string
	for _, p := range parts {
		if strings.TrimSpace(p) != "" {
			ps = append(ps, p)
		}
	}
	if len(ps) == 0 {
		return notStated
	}
	return strings.Join(ps, ", serial ")
}

// testTable is the test and the X-ray system, the word "serial" and the
// kind of test in w's language (the models and serials are names, which a
// translation of the whole cell would refuse to take as prose).
func (r *Report) testTable(w *words) infoTable {
	s := r.Session
	t := infoTable{Title: "The test and the X-ray system", Head: []string{"", ""}}
	testType := s.TestType
	switch {
	case testType == "":
		testType = notStated + " (test_type: acceptance, yearly or after repair)"
	case w != nil:
		// Keyed apart from the word alone: "acceptance" is also the name
		// of a procedure, which stays as it is.
		if tr, ok := w.c.Lookup("test type: " + testType); ok {
			testType = tr
		}
	}
	serial := ", serial "
	if w != nil {
		serial = ", " + w.text("serial") + " "
	}
	orNotStated := func(parts ...string) string { return strings.ReplaceAll(orNotStated(parts...), ", serial ", serial) }
	x := s.XRay
	if x == nil {
		x = &entry.XRaySystem{}
	}
	t.Rows = [][]string{
		{"Type of test", testType},
		{"X-ray system", orNotStated(x.Model, x.Serial)},
		{"Generator", orNotStated(x.Generator, x.GeneratorSerial)},
		{"X-ray tube", orNotStated(x.Tube, x.TubeSerial)},
		{"Image intensifier", orNotStated(s.IntensifierModel, s.IntensifierSerial)},
		{"Procedure", fmt.Sprintf("%s, %d steps, script SHA-256 %s", s.Procedure, r.StepCount, abbrevHex(s.ProcedureHash))},
	}
	if r.Simulated {
		t.Notes = append(t.Notes, "Simulated session: the X-ray system, the intensifier and the meters are the bench simulator's inventions.")
	}
	return t
}

func (r *Report) meterTable() infoTable {
	t := infoTable{Title: "Meters", Head: []string{"Meter", "As the meter identified itself", "Firmware", "Certificate", "Certificate's model and serial", "Certificate applies"}}
	certFor := map[string]Certificate{}
	for _, c := range r.Certificates {
		certFor[c.Meter] = c
	}
	seen := map[string]bool{}
	for _, m := range r.Meters {
		seen[m.Role] = true
		id := strings.TrimSpace(m.Maker + " " + m.Model)
		if m.Serial != "" {
			id += ", serial " + m.Serial
		}
		if id == "" {
			id = m.Raw
		}
		if id == "" && m.Error != "" {
			id = "could not be identified: " + m.Error
		}
		c := certFor[m.Role]
		applies := "yes"
		if !m.CertificateApplies {
			applies = "NO"
			if m.Reason != "" {
				applies += ": " + m.Reason
			}
		}
		t.Rows = append(t.Rows, []string{m.Role, orDash(id), orDash(m.Firmware), orDash(c.ID), orDash(strings.Trim(c.Model+", "+c.Serial, ", ")), applies})
	}
	for _, c := range r.Certificates {
		if seen[c.Meter] {
			continue
		}
		t.Rows = append(t.Rows, []string{c.Meter, "not recorded", "—", c.ID, strings.Trim(c.Model+", "+c.Serial, ", "), "not checked"})
	}
	if len(r.Meters) == 0 {
		t.Notes = append(t.Notes, "The meters' own identification (maker, model, serial, firmware as they reported it) is not in this journal: check the serial numbers on the meters against their certificates.")
	}
	return t
}

// valueSummary groups the entered values of one name: "70 kV (bench
// default, not read off) at steps 19, 24".
func (r *Report) valueSummary(names ...string) []string {
	type group struct {
		text  string
		steps []string
	}
	var order []string
	groups := map[string]*group{}
	for _, v := range r.Values {
		if !contains(names, v.Name) {
			continue
		}
		src := v.Source
		if v.Unconfirmed && !strings.Contains(src, "not read off") {
			src += ", not read off"
		}
		text := strings.TrimSpace(Exact(v.Value.Value)+" "+v.Unit) + " (" + src + ")"
		g, ok := groups[text]
		if !ok {
			g = &group{text: text}
			groups[text] = g
			order = append(order, text)
		}
		step := fmt.Sprint(v.Step)
		if v.FieldMode != "" {
			step += " (" + v.FieldMode + ")"
		}
		g.steps = append(g.steps, step)
	}
	var out []string
	for _, k := range order {
		g := groups[k]
		out = append(out, g.text+" at step"+plural(len(g.steps))+" "+strings.Join(g.steps, ", "))
	}
	return out
}

// setupValues lists the distinct values the procedure asked for under
// key, in order of first appearance.
func (r *Report) setupValues(key string) []string {
	var out []string
	for _, s := range r.Setups {
		if v, ok := s.Setup[key]; ok && !contains(out, v) {
			out = append(out, v)
		}
	}
	return out
}

func (r *Report) beamTable() infoTable {
	t := infoTable{Title: "Beam quality", Head: []string{"", ""}}
	kv := r.valueSummary("tube_voltage")
	if len(kv) == 0 {
		kv = []string{"not entered"}
	}
	t.Rows = append(t.Rows, []string{"Tube voltage", strings.Join(kv, "; ")})
	if ma := r.valueSummary("tube_current"); len(ma) > 0 {
		t.Rows = append(t.Rows, []string{"Tube current", strings.Join(ma, "; ")})
	}
	hvl := r.valueSummary("half_value_layer", "hvl")
	hvlText := "NOT MEASURED: the dosimeter's coefficient was taken at the tube voltage, so its energy dependence is approximate"
	if len(hvl) > 0 {
		hvlText = strings.Join(hvl, "; ")
	}
	t.Rows = append(t.Rows, []string{"Half-value layer", hvlText})
	for _, k := range []struct{ key, label string }{{"quality", "Radiation quality asked for"}, {"filter", "Added filtration asked for"}, {"phantom", "Phantom"}} {
		if vs := r.setupValues(k.key); len(vs) > 0 {
			t.Rows = append(t.Rows, []string{k.label, strings.Join(vs, "; ")})
		}
	}
	for _, c := range r.Corrections {
		if c.Name == "calibration_coefficient" {
			for _, n := range c.Notes {
				if strings.Contains(n, "interpolated") || strings.Contains(n, "row") {
					t.Rows = append(t.Rows, []string{"Dosimeter coefficient taken", n})
				}
			}
		}
	}
	return t
}

func (r *Report) geometryTable() infoTable {
	t := infoTable{Title: "Geometry", Head: []string{"", ""}}
	g := r.Session.Geometry
	if g == nil {
		t.Rows = [][]string{{"Chamber position", notStated}}
		return t
	}
	mm := func(v float64) string {
		if v == 0 {
			return "not stated (chamber taken to be at the input plane)"
		}
		return Exact(v) + " mm"
	}
	face := "no: free in air, no backscatter in the reading"
	if g.AgainstFace {
		face = "yes: the reading includes backscatter from the intensifier"
	}
	back := "none applied"
	if g.Backscatter > 0 {
		back = Exact(g.Backscatter) + " (divided out)"
	} else if g.AgainstFace {
		back = "the certificate's, if it gives one"
	}
	grid := "no: the anti-scatter grid stayed in"
	if g.GridRemoved {
		grid = "yes"
	}
	t.Rows = [][]string{
		{"Focal spot to chamber", mm(g.SourceToChamberMM)},
		{"Focal spot to input plane", mm(g.SourceToInputMM)},
		{"Chamber against the input face", face},
		{"Backscatter factor", back},
		{"Anti-scatter grid removed", grid},
	}
	for _, c := range r.Corrections {
		if c.Name == "inverse_square" {
			f := Factor(c.MinFactor)
			if c.MaxFactor != c.MinFactor {
				f += " to " + Factor(c.MaxFactor)
			}
			t.Rows = append(t.Rows, []string{"Inverse-square factor applied", f})
		}
	}
	return t
}

// setupKeysShown are the set-up keys the per-step table has columns for.
var setupKeysShown = []string{"field_mode", "brightness_control"}

func (r *Report) setupTable() infoTable {
	t := infoTable{Title: "Set-up per step", Head: []string{"Step", "Field mode", "Brightness control", "Other settings asked for"}, Right: []bool{true}}
	lastBC, lastStep := "", 0
	for _, s := range r.Setups {
		if checklistOnly(s.Setup) {
			continue // a checklist line, not a bench set-up
		}
		var other []string
		keys := make([]string, 0, len(s.Setup))
		for k := range s.Setup {
			if !contains(setupKeysShown, k) {
				keys = append(keys, k)
			}
		}
		sort.Strings(keys)
		for _, k := range keys {
			other = append(other, strings.ReplaceAll(k, "_", " ")+" "+s.Setup[k])
		}
		// A step that does not state the brightness control keeps the
		// state the last one set.
		bc, stated := s.Setup["brightness_control"], true
		if bc == "" {
			bc, stated = lastBC, false
		} else {
			lastBC, lastStep = bc, s.Step
		}
		switch {
		case bc == "":
			bc = "not stated"
		case bc == "off":
			bc = "off (manual kV and mA)"
		}
		if !stated && lastBC != "" {
			bc += fmt.Sprintf(", as set at step %d", lastStep)
		}
		t.Rows = append(t.Rows, []string{fmt.Sprint(s.Step), orDash(s.Setup["field_mode"]), bc, orDash(strings.Join(other, "; "))})
	}
	if len(t.Rows) == 0 {
		t.Notes = append(t.Notes, "No set-up was recorded with the prompts (journals before set-ups were recorded).")
	}
	return t
}

func formulaTable() infoTable {
	return infoTable{Title: "Formulas used", Head: []string{"Figure", "Formula", "Source"}, Rows: [][]string{
		{"Conversion factor", "G_x = L / K̇: centre luminance (cd/m²) over the air kerma rate at the input plane (µGy/s), free of backscatter", "IEC 61262-2"},
		{"Luminance non-uniformity", "NU = " + calib.NonUniformityFormula + " over every position read", "common practice (calib.Uniformity)"},
		{"Contrast ratio", "CR = L_open / L_disk at the centre, lead disk at the centre of the input field", "IEC 61262-6"},
		{"Air kerma rate scaling", "K̇_mode / K̇_largest field, expected about (d_largest / d_mode)²", "common practice"},
		{"Air density", "k_TP = ((273.15 + T) / (273.15 + T0)) × (P0 / P)", "IAEA TRS-398 / AAPM TG-61 (the certificate says which T0)"},
		{"Inverse square", "K̇_input = K̇_chamber × (d_chamber / d_input)²", "common practice"},
		{"Backscatter", "K̇ free in air = K̇ on the face / B", "IAEA TRS-457"},
		{"Uncertainty", "U = k·u_c, k from Student's t at the Welch–Satterthwaite degrees of freedom", "JCGM 100:2008 (GUM) 6.2, G.4"},
	}}
}

// limitTable is every limit each result was judged against, the results
// named in w's language (a name with its field mode is no text a catalog
// could look up whole).
func (r *Report) limitTable(w *words) infoTable {
	t := infoTable{Title: "Every limit, with its margin", Head: []string{"Result", "Limit", "Limit value", "Value", "Margin", "Outcome"},
		Right: []bool{false, false, true, true, true, false}}
	for _, res := range r.Results {
		if len(res.Limits) == 0 {
			continue
		}
		val, _ := splitValue(res.Value, res.ExpUnc)
		u := unitWords(res.Unit)
		for _, l := range res.Limits {
			name := l.Kind
			if l.Kind == "baseline" {
				name = fmt.Sprintf("baseline rule (%s of %s)", Percent(l.Fraction), Number(res.Baseline))
			}
			side := "at least"
			if l.Bound == "at_most" {
				side = "at most"
			}
			margin, _ := splitValue(l.Margin, res.ExpUnc)
			outcome := "inside"
			if !l.Passed {
				outcome = "OUTSIDE"
			}
			if l.WithinU {
				outcome += ", within U"
			}
			lv := Exact(l.Value)
			if l.Kind == "baseline" {
				lv = Number(l.Value)
			}
			t.Rows = append(t.Rows, []string{w.resultName(res.Result), name + " " + side, strings.TrimSpace(lv + " " + u), strings.TrimSpace(val + " " + u), margin, outcome})
		}
	}
	t.Intro = []string{"Margin: how far the value lies inside the limit (negative: outside), rounded like the value. “Within U”: the limit lies within the expanded uncertainty of the value, so the verdict could go either way."}
	if len(t.Rows) == 0 {
		t.Notes = append(t.Notes, "No limits were recorded with the results (journals before every limit was recorded): only the deciding limit is known, in the results table.")
	}
	return t
}

// splitValue rounds a value like ValueWithUnc does and returns the value
// and the uncertainty strings.
func splitValue(v, u float64) (string, string) {
	s := ValueWithUnc(v, u)
	a, b, _ := strings.Cut(s, " ± ")
	return a, b
}

// budgetGap is a component a budget of this kind of result should weigh,
// said plainly when it is not among the budget's rows.
type budgetGap struct{ Source, Why string }

// budgetGaps says which of the components a physicist expects are not in
// a result's budget, and why: backscatter, the distances, the dosimeter's
// energy dependence, the photometer's spectral match and the dark.
func (r *Report) budgetGaps(res Result) []budgetGap {
	has := func(words ...string) bool {
		for _, b := range res.Budget {
			s := strings.ToLower(b.Source)
			for _, w := range words {
				if strings.Contains(s, w) {
					return true
				}
			}
		}
		return false
	}
	kerma := res.Quantity == "conversion_factor" || res.Quantity == "input_kerma_rate"
	lum := res.Quantity == "conversion_factor" || res.Quantity == "non_uniformity" || res.Quantity == "contrast_ratio"
	g := r.Session.Geometry
	var out []budgetGap
	if kerma && !has("backscatter") {
		why := "not quantified: the uncertainty of the backscatter factor is not in this budget"
		if g != nil && !g.AgainstFace {
			why = "none: the chamber was free in air, no backscatter correction"
		}
		out = append(out, budgetGap{"backscatter", why})
	}
	if kerma && !has("distance") {
		why := "not quantified: the distances' uncertainty is not in this budget"
		if g == nil || g.SourceToChamberMM == 0 || g.SourceToInputMM == 0 || g.SourceToChamberMM == g.SourceToInputMM {
			why = "none: the chamber was taken to be at the input plane, no inverse-square correction"
		}
		out = append(out, budgetGap{"distances (inverse square)", why})
	}
	if kerma && !has("energy") {
		why := "not quantified: the coefficient's change across the beam qualities is not in this budget"
		if r.hvlNotMeasured() {
			why += "; the half-value layer was not measured, so the coefficient was taken at the tube voltage"
		}
		out = append(out, budgetGap{"dosimeter energy dependence", why})
	}
	if lum && !has("spectral") {
		why := "not quantified: no spectral mismatch correction was applied (the photometer's relative spectral responsivity is not stated)"
		if res.Quantity != "conversion_factor" {
			why = "cancels: both luminances come from one photometer on the same phosphor"
		}
		out = append(out, budgetGap{"photometer spectral match", why})
	}
	if lum && !has("dark") {
		out = append(out, budgetGap{"dark reading", "not quantified: the beam-off luminance was subtracted, its scatter is not in this budget"})
	}
	return out
}

func (r *Report) hvlNotMeasured() bool {
	for _, v := range r.Values {
		if v.Name == "half_value_layer" || v.Name == "hvl" {
			return false
		}
	}
	return true
}

// checklistOnly: the set-up only numbers a checklist line.
func checklistOnly(m map[string]string) bool {
	for k := range m {
		if k != "checklist" && k != "item" {
			return false
		}
	}
	return true
}
