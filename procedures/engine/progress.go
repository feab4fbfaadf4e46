package engine

import (
	"fmt"
	"strings"
	"time"

	"kermalux/procedures/panel"
	"kermalux/procedures/script"
)

// progress is where each step stands in the session, for the ear: the
// operator's own steps (those that ask something) are counted, the silent
// computations are not; the parts of a sequence are numbered; and each
// step has an estimate of the engineer's time it needs and the exposures
// it takes (script's estimates of set-up times, marked there as such).
type progress struct {
	task   []int // by step index 0..n-1: the operator's step number, 0 for a silent step
	tasks  int
	part   []int // part number, 0 for the sequence's own steps
	parts  int
	expo   []int           // exposures of each step
	effort []time.Duration // estimated engineer time of each step
}

// isTask: the step asks the operator something.
func isTask(k StepKind) bool {
	return k == Prepare || k == Checklist || k == Enter || k == Measure
}

func newProgress(p Procedure, l Settings) progress {
	n := len(p.Steps)
	pr := progress{task: make([]int, n), part: make([]int, n), expo: make([]int, n), effort: make([]time.Duration, n)}
	bench := script.Bench{}
	last := ""
	for i, s := range p.Steps {
		if isTask(s.Kind) {
			pr.tasks++
			pr.task[i] = pr.tasks
		}
		if s.Part != "" {
			if s.Part != last {
				pr.parts++
				last = s.Part
			}
			pr.part[i] = pr.parts
		}
		pr.expo[i], pr.effort[i] = stepEffort(s, bench, l)
	}
	return pr
}

// stepEffort estimates the exposures a step takes and the engineer's time
// it needs, with the bench as the earlier prompts left it.
func stepEffort(s Step, bench script.Bench, l Settings) (int, time.Duration) {
	say := script.SpeakingTime(s.Text)
	switch s.Kind {
	case Say:
		return 0, say
	case Prepare:
		return 0, say + bench.Change(s.Setup) + script.ReactionTime
	case Checklist:
		d := say
		for _, it := range s.Items {
			d += script.SpeakingTime(it) + script.ReactionTime
		}
		return 0, d
	case Enter:
		return 0, say + script.ReadOffTime + script.ReactionTime
	case Compute, Judge:
		return 0, script.ResultTime / 2
	case Measure:
		m := s.Measure
		if m == nil {
			return 0, say
		}
		if !m.Beam {
			d := m.Duration
			if d == 0 {
				d = l.DarkTime
			}
			return 0, say + bench.Change(s.Setup) + script.ReactionTime + d + l.SettleWindow
		}
		positions := m.Positions
		if len(positions) == 0 {
			positions = []Position{{}}
		}
		var d time.Duration
		for _, p := range positions {
			setup := map[string]string{}
			for k, v := range s.Setup {
				setup[k] = v
			}
			if p.Label != "" {
				setup[script.SetPhotometerRadius] = fmt.Sprintf("%g r", p.Radius)
				setup[script.SetPhotometerAngle] = fmt.Sprintf("%g deg", p.Angle)
			}
			d += say + bench.Change(setup) + 3*script.ReactionTime + script.ExposureTime
		}
		return len(positions), d
	}
	return 0, say
}

// taskAt is the operator's step number at step index i (0-based) or the
// next one after it (for a silent step), at most the count.
func (pr progress) taskAt(i int) int {
	for j := i; j < len(pr.task); j++ {
		if pr.task[j] > 0 {
			return pr.task[j]
		}
	}
	return pr.tasks
}

// left is what remains from step index i (0-based) on: exposures and time.
func (pr progress) left(i int) (int, time.Duration) {
	var n int
	var d time.Duration
	for j := i; j < len(pr.expo); j++ {
		n += pr.expo[j]
		d += pr.effort[j]
	}
	return n, d
}

// inPart is what part number k takes: exposures and time.
func (pr progress) inPart(k int) (int, time.Duration) {
	var n int
	var d time.Duration
	for j := range pr.part {
		if pr.part[j] == k {
			n += pr.expo[j]
			d += pr.effort[j]
		}
	}
	return n, d
}

// spokenMinutes says an estimate of time in whole minutes ("about 4
// minutes", "under a minute").
func (e *Engine) spokenMinutes(d time.Duration) string {
	m := int((d + 30*time.Second) / time.Minute)
	switch m {
	case 0:
		return e.t("under a minute")
	case 1:
		return e.t("about 1 minute")
	}
	return e.t("about %d minutes", m)
}

// exposures counts exposures, capitalised when it opens a sentence.
func (e *Engine) exposures(n int, capital bool) string {
	var s string
	switch n {
	case 0:
		s = "no exposures"
	case 1:
		s = "1 exposure"
	default:
		s = "%d exposures"
	}
	if capital {
		s = capitalise(s)
	}
	if n > 1 {
		return e.t(s, n)
	}
	return e.t(s)
}

// Caution is the radiation-safety caution said at the start of every
// session, in every language.
const Caution = "Caution: X-rays are dangerous. Follow your local rules and your radiation safety officer."

// opening is said when a session starts: its parts, exposures, the time it
// should take and the beam-on budget it was checked against.
func (e *Engine) opening(title string) string {
	pr := e.prog
	n, d := pr.left(0)
	var b strings.Builder
	b.WriteString(e.t("Starting %s.", e.text(title)))
	if pr.parts > 1 {
		b.WriteString(" " + e.t("%d parts,", pr.parts))
	}
	// Without the parts the exposures open a sentence of their own.
	fmt.Fprintf(&b, " %s, %s.", e.exposures(n, pr.parts <= 1), e.spokenMinutes(d))
	if bb := e.cfg.Procedure.BeamBudget; bb > 0 {
		b.WriteString(" " + e.t("Beam-on budget %s.", e.duration(bb)))
	}
	b.WriteString(" " + e.t(Caution))
	return b.String()
}

// partIntro is said at the first step of a part: which part, what it takes
// and what is left after it.
func (e *Engine) partIntro(i int) string {
	pr := e.prog
	k := pr.part[i]
	n, d := pr.inPart(k)
	title := e.cfg.Procedure.Steps[i].PartTitle
	if title == "" {
		title = e.cfg.Procedure.Steps[i].Part
	}
	text := e.t("Part %d of %d: %s.", k, pr.parts, e.text(title)) + fmt.Sprintf(" %s, %s.", e.exposures(n, true), e.spokenMinutes(d))
	var restN int
	var restD time.Duration
	for j := i; j < len(pr.part); j++ {
		if pr.part[j] != k {
			restN += pr.expo[j]
			restD += pr.effort[j]
		}
	}
	if k < pr.parts {
		text += " " + e.t("After it: %s, %s.", e.exposures(restN, false), e.spokenMinutes(restD))
	} else {
		text += " " + e.t("It is the last part.")
	}
	return text
}

func capitalise(s string) string {
	if s == "" {
		return s
	}
	return strings.ToUpper(s[:1]) + s[1:]
}

// withProgress fills a prompt's progress fields for step idx (1-based).
func (e *Engine) withProgress(p *panel.Prompt) {
	i := p.Step - 1
	if i < 0 || i >= len(e.prog.task) {
		return
	}
	p.Task, p.Tasks = e.prog.task[i], e.prog.tasks
	if p.Task == 0 {
		// A prompt of a silent step (a retake after a computation):
		// the operator's last step before it.
		for j := i; j >= 0 && p.Task == 0; j-- {
			p.Task = e.prog.task[j]
		}
	}
	p.Part, p.Parts = e.prog.part[i], e.prog.parts
	if p.Part > 0 {
		p.PartTitle = e.text(e.cfg.Procedure.Steps[i].PartTitle)
	}
}
