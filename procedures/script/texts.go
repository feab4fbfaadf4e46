package script

import "fmt"

// Text is one text of a procedure that is said or shown to the engineer,
// with where it is written.
type Text struct {
	Pos  Pos
	What string // "title", "text of step warmup", "line 2 of step checklist", "position label"
	Text string
}

// Texts lists the texts a checked procedure says or shows, its included
// procedures' too (Check resolves includes), each procedure once: its
// title (the part's name in a sequence), every step's text, checklist
// lines and photometer position labels.
func Texts(p *Procedure) []Text {
	var out []Text
	seen := map[*Procedure]bool{}
	var proc func(p *Procedure)
	var steps func(ss []Step)
	steps = func(ss []Step) {
		for i := range ss {
			s := &ss[i]
			if s.Text != "" {
				out = append(out, Text{Pos: fieldPos(s, "text"), What: fmt.Sprintf("text of step %s", s.ID), Text: s.Text})
			}
			for k, it := range s.Items {
				out = append(out, Text{Pos: it.Pos, What: fmt.Sprintf("line %d of step %s", k+1, s.ID), Text: it.Text})
			}
			if m := s.Measure; m != nil {
				for _, ps := range m.Positions {
					if ps.Label != "" {
						out = append(out, Text{Pos: ps.Pos, What: fmt.Sprintf("position label of step %s", s.ID), Text: ps.Label})
					}
				}
			}
			if s.Repeat != nil {
				steps(s.Repeat.Steps)
			}
			if s.Include != nil && s.Include.Resolved != nil {
				proc(s.Include.Resolved)
			}
		}
	}
	proc = func(p *Procedure) {
		if p == nil || seen[p] {
			return
		}
		seen[p] = true
		if p.Title != "" {
			pos := p.Pos
			if fp, ok := p.Fields["title"]; ok {
				pos = fp
			}
			out = append(out, Text{Pos: pos, What: "title of procedure " + p.Name, Text: p.Title})
		}
		steps(p.Steps)
	}
	proc(p)
	return out
}

// Translator tells whether a language has a text: *catalog.Catalog
// implements it (a text found whole, or composed from a catalogued
// format, as a position label "up 0.5 r" is from "up %s r").
type Translator interface {
	Translate(text string) (string, bool)
	Code() string
}

// MissingTexts is a problem for each text of a checked procedure (Texts)
// the language has no translation for, naming the text and where it is
// written; none for English.
func MissingTexts(p *Procedure, tr Translator) Problems {
	if tr == nil {
		return nil
	}
	var ps Problems
	for _, t := range Texts(p) {
		if _, ok := tr.Translate(t.Text); !ok {
			ps = append(ps, Problem{Pos: t.Pos, Reason: fmt.Sprintf("%s has no translation into %q: add it to a catalog (en: %q)", t.What, tr.Code(), t.Text)})
		}
	}
	return ps
}

func fieldPos(s *Step, key string) Pos {
	if p, ok := s.Fields[key]; ok {
		return p
	}
	return s.Pos
}
