package speech

import (
	"regexp"
	"strings"
	"unicode"
	"unicode/utf8"
)

// spoken is one written form and how it is said. Forms marked afterNumber
// are rewritten only right after a number ("6 s" but not the word "s").
type spoken struct {
	written, said string
	afterNumber   bool
}

// earTable lists written forms in the order they are tried: longer forms
// first, so "µGy/s" wins over "µGy".
var earTable = []spoken{
	{"cd/m²", "candela per square metre", false},
	{"cd/m2", "candela per square metre", false},
	{"µGy/s", "micro-gray per second", false},
	{"nGy/s", "nano-gray per second", false},
	{"mGy/s", "milli-gray per second", false},
	{"µGy", "micro-gray", false},
	{"nGy", "nano-gray", false},
	{"mGy", "milli-gray", false},
	{"°C", "degrees Celsius", false},
	{"kPa", "kilopascal", false},
	{"hPa", "hectopascal", false},
	{"mmAl", "millimetre aluminium", false},
	{"mm", "millimetre", true},
	{"cm", "centimetre", true},
	{"kVp", "kilovolt peak", false},
	{"kV", "kilovolt", true},
	{"mAs", "milliampere second", true},
	{"mA", "milliampere", true},
	{"ms", "milliseconds", true},
	{"min", "minutes", true},
	{"s", "seconds", true},
	{"m", "metre", true},
	{"%", "percent", true},
	{"k_TP", "k T P", false},
	{"RQA5", "R Q A 5", false},
	{"±", "plus or minus", false},
}

var earPattern = func() *regexp.Regexp {
	alts := make([]string, len(earTable))
	for i, s := range earTable {
		alts[i] = regexp.QuoteMeta(s.written)
	}
	return regexp.MustCompile(strings.Join(alts, "|"))
}()

var earIndex = func() map[string]spoken {
	m := make(map[string]spoken, len(earTable))
	for _, s := range earTable {
		m[s.written] = s
	}
	return m
}()

// ForEar rewrites text written for the eye into text for a speech
// synthesiser: unit symbols become words ("cd/m²" → "candela per square
// metre", "32cm" → "32 centimetre"), dashes become pauses, and characters a
// synthesiser reads badly (control characters) are dropped. A unit symbol
// is rewritten only when it stands alone (not inside a longer word), and
// short symbols such as "s" and "m" only right after a number.
func ForEar(text string) string {
	text = strings.NewReplacer(
		"μ", "µ", // Greek mu to micro sign
		"uGy", "µGy",
		" — ", ", ", " – ", ", ", "—", ", ", "–", ", ",
		"\t", " ", "\n", " ", "\r", " ",
	).Replace(text)
	text = strings.Map(func(r rune) rune {
		if unicode.IsControl(r) {
			return -1
		}
		return r
	}, text)
	text = strings.Join(strings.Fields(text), " ")

	var b strings.Builder
	last := 0
	for _, loc := range earPattern.FindAllStringIndex(text, -1) {
		s, e := loc[0], loc[1]
		form := earIndex[text[s:e]]
		before, _ := utf8.DecodeLastRuneInString(text[:s])
		after, _ := utf8.DecodeRuneInString(text[e:])
		if s == 0 {
			before = ' '
		}
		if e == len(text) {
			after = ' '
		}
		if unicode.IsLetter(before) || before == '_' || unicode.IsLetter(after) || unicode.IsDigit(after) || after == '_' {
			continue // part of a longer word
		}
		numBefore := unicode.IsDigit(before)
		if before == ' ' && s > 0 {
			numBefore = endsWithDigit(text[:s-1])
		}
		if form.afterNumber && !numBefore {
			continue
		}
		b.WriteString(text[last:s])
		if unicode.IsDigit(before) {
			b.WriteByte(' ')
		}
		b.WriteString(form.said)
		last = e
	}
	b.WriteString(text[last:])
	return strings.Join(strings.Fields(b.String()), " ")
}

func endsWithDigit(s string) bool {
	r, _ := utf8.DecodeLastRuneInString(s)
	return unicode.IsDigit(r)
}
