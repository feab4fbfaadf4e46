package script

import (
	"fmt"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strings"
	"time"

	"kermalux/procedures/builtin"
)

// Check returns every problem of p in the context env: step ids,
// references, units of limits, the safety rules (no beam before a
// pre-exposure safety checklist; the beam-on budget; an expected range for
// every exposure), includes, when env.Quantities is given, that a
// configured meter reports each quantity measured, and, when env.Texts is
// given, that every text said or shown has a translation into the bench's
// language (MissingTexts). It returns nil for a
// valid procedure. Problems of form were already returned by Parse.
func Check(p *Procedure, env Env) Problems {
	if p == nil {
		return Problems{{Reason: "no procedure"}}
	}
	x := newExpander(env, false)
	x.run(p)
	ps := x.problems()
	if env.Texts != nil {
		ps = append(ps, MissingTexts(p, env.Texts)...)
	}
	return ps
}

// CheckFile loads the script at path and checks it; it returns every
// problem of form and of content. A file that cannot be read is one
// problem naming the file.
func CheckFile(path string, env Env) (*Procedure, Problems) {
	p, err := Load(path)
	var probs Problems
	if err != nil {
		if ps, ok := err.(Problems); ok {
			probs = append(probs, ps...)
		} else {
			return nil, Problems{{Pos: Pos{File: path}, Reason: err.Error()}}
		}
	}
	if p == nil {
		return nil, probs
	}
	probs = append(probs, Check(p, env)...)
	return p, dedupe(probs)
}

// CheckBuiltin parses and checks the built-in procedure name.
func CheckBuiltin(name string, env Env) (*Procedure, Problems) {
	p, err := LoadBuiltin(name)
	var probs Problems
	if err != nil {
		if ps, ok := err.(Problems); ok {
			probs = append(probs, ps...)
		} else {
			return nil, Problems{{Pos: Pos{File: BuiltinPrefix + name}, Reason: err.Error()}}
		}
	}
	if p == nil {
		return nil, probs
	}
	return p, dedupe(append(probs, Check(p, env)...))
}

// Flatten expands includes and per-field-mode repetitions into the linear
// list of steps the engine walks. It refuses a procedure that Check
// rejects, and a per_field_mode block that takes its modes from the bench
// when env.FieldModes is empty.
func Flatten(p *Procedure, env Env) (*Flat, error) {
	if p == nil {
		return nil, fmt.Errorf("flatten: no procedure")
	}
	x := newExpander(env, true)
	x.run(p)
	if ps := x.problems(); len(ps) > 0 {
		return nil, ps
	}
	for i := range x.steps {
		x.steps[i].Index = i + 1
		x.steps[i].Of = len(x.steps)
		if part, _, ok := strings.Cut(x.steps[i].ID, "/"); ok {
			x.steps[i].Part, x.steps[i].PartTitle = part, x.partTitles[part]
		}
	}
	return &Flat{Procedure: p, BeamBudget: p.BeamBudget, Steps: x.steps}, nil
}

// BeamPlan is what a checked procedure's readings may do with the beam
// (BeamUse): Readings beam readings, which keep Reserve of the budget
// for themselves (min_beam and a release each) and could use Most
// together, each up to its max_beam. When Most is above the budget the
// engine holds them to it (Pool); the checker has proved that Reserve
// fits.
type BeamPlan struct {
	Readings      int
	Reserve, Most time.Duration
}

// BeamUse expands p as Check does (a per_field_mode block from the bench
// at env's field modes, else its max_modes) and sums its beam readings.
func BeamUse(p *Procedure, env Env) BeamPlan {
	x := newExpander(env, false)
	x.run(p)
	var b BeamPlan
	for _, s := range x.steps {
		if s.MaxBeam() > 0 {
			b.Readings += s.Step.Measure.PositionCount()
			b.Reserve += s.Reserve()
			b.Most += s.MaxBeam()
		}
	}
	return b
}

// DefaultResolver finds included procedures: a name with a slash or a
// .yaml ending is a path relative to the including file; a plain name is
// looked for next to the including file, then among the built-ins.
// Procedures read from the built-ins include only built-ins.
type DefaultResolver struct {
	cache map[string]*Procedure
}

// Resolve implements Resolver.
func (r *DefaultResolver) Resolve(name, from string) (*Procedure, error) {
	if r.cache == nil {
		r.cache = map[string]*Procedure{}
	}
	load := func(key string, f func() (*Procedure, error)) (*Procedure, error) {
		if p, ok := r.cache[key]; ok {
			return p, nil
		}
		p, err := f()
		if err != nil {
			return p, err
		}
		r.cache[key] = p
		return p, nil
	}
	fromBuiltin := strings.HasPrefix(from, BuiltinPrefix)
	if strings.ContainsRune(name, '/') || strings.HasSuffix(name, ".yaml") {
		if fromBuiltin {
			return nil, fmt.Errorf("a built-in procedure can include only built-ins, not %q", name)
		}
		path := filepath.Join(filepath.Dir(from), name)
		return load(path, func() (*Procedure, error) { return Load(path) })
	}
	if !fromBuiltin {
		path := filepath.Join(filepath.Dir(from), name+".yaml")
		if _, err := os.Stat(path); err == nil {
			return load(path, func() (*Procedure, error) { return Load(path) })
		}
	}
	data, err := builtin.Read(name)
	if err != nil {
		return nil, fmt.Errorf("no procedure %q next to %s nor among the built-ins (%s)", name, from, strings.Join(builtin.Names(), ", "))
	}
	return load(BuiltinPrefix+name, func() (*Procedure, error) { return Parse(BuiltinPrefix+name+".yaml", data) })
}

// BuiltinPrefix starts the file name of a built-in procedure in positions.
const BuiltinPrefix = "builtin/"

// LoadBuiltin parses the built-in procedure name.
func LoadBuiltin(name string) (*Procedure, error) {
	data, err := builtin.Read(name)
	if err != nil {
		return nil, err
	}
	return Parse(BuiltinPrefix+name+".yaml", data)
}

func dedupe(ps Problems) Problems {
	seen := map[string]bool{}
	var out Problems
	for _, p := range ps {
		k := p.String()
		if seen[k] {
			continue
		}
		seen[k] = true
		out = append(out, p)
	}
	// Files in the order they first appear, then by position.
	rank := map[string]int{}
	for _, p := range out {
		if _, ok := rank[p.Pos.File]; !ok {
			rank[p.Pos.File] = len(rank)
		}
	}
	sort.SliceStable(out, func(i, j int) bool {
		a, b := out[i].Pos, out[j].Pos
		if a.File != b.File {
			return rank[a.File] < rank[b.File]
		}
		if a.Line != b.Line {
			return a.Line < b.Line
		}
		return a.Col < b.Col
	})
	return out
}

// expander walks a procedure in run order, expanding includes and
// repetitions, and collects problems on the way.
type expander struct {
	env      Env
	res      Resolver
	forRun   bool
	probs    Problems
	steps    []FlatStep
	byID     map[string]int
	checked  map[*Procedure]bool
	included map[string]bool
	stack    []string
	entered  map[string]bool
	// partTitles are the titles of the top-level includes, by include id.
	partTitles map[string]string
	safetyAt   *Pos
	safetyAll  []Pos // every safety checklist, for the "comes later" hint
	earlyBeam  []Pos // beam steps before any safety checklist
	// pools are the budgets of the procedure instances being expanded,
	// outermost first (FlatStep.Pools).
	pools []Pool
}

func newExpander(env Env, forRun bool) *expander {
	res := env.Resolver
	if res == nil {
		res = &DefaultResolver{}
	}
	return &expander{env: env, res: res, forRun: forRun, byID: map[string]int{},
		checked: map[*Procedure]bool{}, included: map[string]bool{}, entered: map[string]bool{}, partTitles: map[string]string{}}
}

func (x *expander) errf(p Pos, format string, args ...any) {
	x.probs = append(x.probs, Problem{Pos: p, Reason: fmt.Sprintf(format, args...)})
}

func (x *expander) problems() Problems {
	for _, b := range x.earlyBeam {
		if len(x.safetyAll) > 0 {
			at := x.safetyAll[0].String()
			if x.safetyAll[0].File == b.File {
				at = fmt.Sprintf("line %d", x.safetyAll[0].Line)
			}
			x.errf(b, "beam step comes before the pre-exposure safety checklist (the checklist at %s must come first)", at)
		} else {
			x.errf(b, "beam step with no pre-exposure safety checklist before it (add a safety_checklist step, or include pre-exposure-safety, earlier)")
		}
	}
	x.earlyBeam = nil
	return dedupe(x.probs)
}

func (x *expander) run(p *Procedure) {
	x.stack = append(x.stack, p.Name)
	x.included[p.Name] = true
	x.pools = []Pool{{ID: "", Procedure: p.Name, Budget: p.BeamBudget}}
	x.proc(p, "")
}

// beamUse is what a run of steps may do with the beam: use up to most,
// and keep reserve in its pools (the sum of the readings' Reserve).
type beamUse struct {
	most, reserve time.Duration
}

func (u *beamUse) add(v beamUse) {
	u.most += v.most
	u.reserve += v.reserve
}

// proc expands one procedure instance and returns the beam-on its steps
// may use. Its budget must keep every reading's reserve (min_beam and its
// release); when the readings may use more than the budget (each up to
// its max_beam), the budget is a pool that the engine enforces: a
// reading stops where the budget less the reserves still to come is
// used up.
func (x *expander) proc(p *Procedure, prefix string) beamUse {
	if !x.checked[p] {
		x.checked[p] = true
		x.static(p)
	}
	var sum beamUse
	for i := range p.Steps {
		sum.add(x.step(p, prefix, &p.Steps[i], "", nil))
	}
	// A budget that could not be read (its own error says why) is not
	// compared: "budget of 0 s exceeded" would only confuse.
	if p.BeamBudget > 0 && sum.reserve > p.BeamBudget {
		pos := p.Pos
		if fp, ok := p.Fields["beam_budget"]; ok {
			pos = fp
		}
		if sum.reserve == sum.most {
			x.errf(pos, "beam-on budget of %s is exceeded: the steps may use up to %s of beam%s", fmtDur(p.BeamBudget), fmtDur(sum.most), repeatNote(p))
		} else {
			x.errf(pos, "beam-on budget of %s cannot keep every reading's reserve: the readings need at least %s (min_beam and a %s release each)%s", fmtDur(p.BeamBudget), fmtDur(sum.reserve), fmtDur(ReleaseTime), repeatNote(p))
		}
	}
	if p.BeamBudget > 0 {
		sum.most = min(sum.most, p.BeamBudget)
	}
	return sum
}

func repeatNote(p *Procedure) string {
	var notes []string
	for _, s := range p.Steps {
		if s.Kind == KindPerFieldMode && s.Repeat != nil {
			n := len(s.Repeat.Modes)
			if s.Repeat.FromBench {
				n = s.Repeat.MaxModes
			}
			notes = append(notes, fmt.Sprintf("%q repeats %d times", s.ID, n))
		}
	}
	if len(notes) == 0 {
		return ""
	}
	return " (" + strings.Join(notes, "; ") + ")"
}

func fmtDur(d time.Duration) string {
	return formatNumber(d.Seconds()) + " s"
}

// step expands one written step in mode (empty outside per_field_mode)
// and returns the beam-on it may use.
func (x *expander) step(p *Procedure, prefix string, s *Step, mode string, modes []string) beamUse {
	k, _ := kindOf(s.Kind)
	if k != nil && k.expand != nil {
		return k.expand(x, p, prefix, s)
	}
	fs := FlatStep{ID: prefix + s.ID, FieldMode: mode, Procedure: p.Name, Step: x.instance(p, s, mode)}
	if mode != "" {
		fs.ID += "@" + mode
	}
	if k != nil && k.at != nil {
		k.at(x, place{prefix: prefix, written: s, step: &fs.Step, mode: mode, modes: modes})
	}
	if _, dup := x.byID[fs.ID]; !dup {
		x.byID[fs.ID] = len(x.steps)
	}
	if fs.MaxBeam() > 0 {
		fs.Pools = slices.Clone(x.pools)
	}
	x.steps = append(x.steps, fs)
	return beamUse{most: fs.MaxBeam(), reserve: fs.Reserve()}
}

func (x *expander) repeat(p *Procedure, prefix string, s *Step) beamUse {
	r := s.Repeat
	if r == nil {
		return beamUse{}
	}
	modes := r.Modes
	if r.FromBench {
		switch {
		case len(x.env.FieldModes) > 0:
			modes = x.env.FieldModes
			seenMode := map[string]bool{}
			for _, m := range modes {
				if seenMode[m] {
					x.errf(s.Pos, "field mode %q is listed twice by the bench", m)
					return beamUse{}
				}
				seenMode[m] = true
				if m == "" || strings.ContainsAny(m, "@/{}") {
					x.errf(s.Pos, "field mode %q from the bench: a mode name must not be empty nor contain @, /, { or }", m)
					return beamUse{}
				}
			}
			if r.MaxModes > 0 && len(modes) > r.MaxModes {
				x.errf(s.Fields["max_modes"], "the bench lists %d field modes, more than max_modes %d", len(modes), r.MaxModes)
			}
		case x.forRun:
			x.errf(s.Pos, "per_field_mode %q takes its modes from the bench file, and none were given", s.ID)
			return beamUse{}
		case r.MaxModes == 0:
			x.errf(s.Pos, "per_field_mode %q takes its modes from the bench: give max_modes so the beam-on budget can be checked", s.ID)
			return beamUse{}
		default:
			for i := 1; i <= r.MaxModes; i++ {
				modes = append(modes, fmt.Sprintf("mode %d", i))
			}
		}
	}
	var sum beamUse
	for _, m := range modes {
		for i := range r.Steps {
			sum.add(x.step(p, prefix, &r.Steps[i], m, modes))
		}
	}
	return sum
}

func (x *expander) include(p *Procedure, prefix string, s *Step) beamUse {
	in := s.Include
	if in == nil || in.Procedure == "" {
		return beamUse{}
	}
	inc, err := x.res.Resolve(in.Procedure, p.File)
	if err != nil {
		if ps, ok := err.(Problems); ok {
			x.probs = append(x.probs, ps...)
		}
		if inc == nil {
			if _, ok := err.(Problems); !ok {
				x.errf(s.Fields["procedure"], "include %q: %v", in.Procedure, err)
			}
			return beamUse{}
		}
	}
	in.Resolved = inc
	for _, n := range x.stack {
		if n == inc.Name {
			x.errf(s.Fields["procedure"], "include cycle: %s → %s", strings.Join(x.stack, " → "), inc.Name)
			return beamUse{}
		}
	}
	if in.Once && x.included[inc.Name] {
		return beamUse{}
	}
	x.included[inc.Name] = true
	if prefix == "" {
		x.partTitles[s.ID] = inc.Title
	}
	x.stack = append(x.stack, inc.Name)
	npools := len(x.pools)
	if inc.BeamBudget > 0 {
		x.pools = append(x.pools, Pool{ID: prefix + s.ID + "/", Procedure: inc.Name, Budget: inc.BeamBudget})
	}
	defer func() {
		x.stack = x.stack[:len(x.stack)-1]
		x.pools = x.pools[:npools]
	}()
	// An included procedure keeps its own budget as a pool inside the
	// sequence's: it may use up to the smaller of its steps' most and its
	// budget, and the sequence's budget must keep its readings' reserves.
	return x.proc(inc, prefix+s.ID+"/")
}

// instance copies a written step for one run position: {mode}
// substituted, the procedure's defaults filled in, a beam quality's
// tube voltage and filter added to the setup. The kind's own part is
// copied by its instance function (kindTable), so that checking the
// instance never changes the written step.
func (x *expander) instance(p *Procedure, s *Step, mode string) Step {
	st := *s
	sub := func(t string) string { return subMode(t, mode) }
	largest := x.largest
	st.Text = sub(s.Text)
	st.Items = nil
	for _, it := range s.Items {
		st.Items = append(st.Items, Item{Text: sub(it.Text), Pos: it.Pos})
	}
	st.Setup = nil
	for _, kv := range s.Setup {
		v := sub(kv.Value)
		if kv.Key == SetFieldMode {
			v = largest(v)
		}
		st.Setup = append(st.Setup, Setting{Key: kv.Key, Value: v, Pos: kv.Pos})
	}
	if k, ok := kindOf(s.Kind); ok && k.instance != nil {
		k.instance(x, p, s, &st, mode)
	}
	return st
}

// subMode replaces {mode} in t by the field mode (none outside
// per_field_mode).
func subMode(t, mode string) string {
	if mode == "" {
		return t
	}
	return strings.ReplaceAll(t, "{mode}", mode)
}

// largest replaces LargestMode by the bench's first field mode (benches
// list them largest first), when the bench's modes are known.
func (x *expander) largest(t string) string {
	if t == LargestMode && len(x.env.FieldModes) > 0 {
		return x.env.FieldModes[0]
	}
	return t
}

// resolve finds the flat id a reference in a step of mode names, among
// the steps already expanded in the same procedure instance.
func (x *expander) resolve(prefix, ref, mode string, modes []string) (string, bool) {
	if id, m, ok := strings.Cut(ref, "@"); ok {
		if m == "first" && len(modes) > 0 {
			m = modes[0]
		}
		_, found := x.byID[prefix+id+"@"+m]
		return prefix + id + "@" + m, found
	}
	if mode != "" {
		if _, ok := x.byID[prefix+ref+"@"+mode]; ok {
			return prefix + ref + "@" + mode, true
		}
	}
	_, ok := x.byID[prefix+ref]
	return prefix + ref, ok
}

// static checks one written procedure, once: step ids, meters, measure
// steps' safety fields, {mode} placement.
func (x *expander) static(p *Procedure) {
	seen := map[string]Pos{}
	var walk func(steps []Step, inRepeat bool)
	walk = func(steps []Step, inRepeat bool) {
		for i := range steps {
			s := &steps[i]
			if s.ID != "" {
				if first, dup := seen[s.ID]; dup {
					x.errf(s.Fields["id"], "duplicate step id %q (first used at line %d)", s.ID, first.Line)
				} else {
					seen[s.ID] = s.Fields["id"]
				}
			}
			x.staticStep(p, s, inRepeat)
			if s.Repeat != nil {
				walk(s.Repeat.Steps, true)
			}
		}
	}
	walk(p.Steps, false)
}

func (x *expander) staticStep(p *Procedure, s *Step, inRepeat bool) {
	if !inRepeat {
		hasMode := strings.Contains(s.Text, "{mode}")
		for _, it := range s.Items {
			hasMode = hasMode || strings.Contains(it.Text, "{mode}")
		}
		for _, kv := range s.Setup {
			hasMode = hasMode || strings.Contains(kv.Value, "{mode}")
		}
		if s.Measure != nil {
			hasMode = hasMode || strings.Contains(s.Measure.FieldMode, "{mode}")
		}
		if hasMode {
			x.errf(s.Pos, "step %q uses {mode} outside a per_field_mode block", s.ID)
		}
	}
	if k, ok := kindOf(s.Kind); ok && k.static != nil {
		k.static(x, p, s)
	}
}

func (s Setup) pos(key string) Pos {
	for _, kv := range s {
		if kv.Key == key {
			return kv.Pos
		}
	}
	return Pos{}
}
