package speech

import (
	"regexp"
	"strings"
	"unicode"
	"unicode/utf8"
)

// spoken is one written form and how it is said: one (after the number 1,
// before a noun such as "field", and after "per") and many (after any other
// number). Forms marked afterNumber are rewritten only right after a number
// ("6 s" but not the word "s"). Unit names follow NIST SP 811 (2008) 9.3
// and 9.7: the plural is formed on the unit name ("candelas per square
// metre", "micrograys per second"); spelled the British way, as the board
// speaks with an English voice.
type spoken struct {
	written     string
	one, many   string
	afterNumber bool
}

// earTable lists written forms in the order they are tried: longer forms
// first, so "µGy/s" wins over "µGy".
var earTable = []spoken{
	{"cd·m⁻²/(µGy·s⁻¹)", "candela per square metre per microgray per second", "candelas per square metre per microgray per second", false},
	{"cd/m²", "candela per square metre", "candelas per square metre", false},
	{"cd/m2", "candela per square metre", "candelas per square metre", false},
	{"cd·m⁻²", "candela per square metre", "candelas per square metre", false},
	{"µGy·s⁻¹", "microgray per second", "micrograys per second", false},
	{"µGy/s", "microgray per second", "micrograys per second", false},
	{"nGy/s", "nanogray per second", "nanograys per second", false},
	{"mGy/s", "milligray per second", "milligrays per second", false},
	{"µGy", "microgray", "micrograys", false},
	{"nGy", "nanogray", "nanograys", false},
	{"mGy", "milligray", "milligrays", false},
	{"mR/min", "milliroentgen per minute", "milliroentgens per minute", false},
	{"mR/s", "milliroentgen per second", "milliroentgens per second", false},
	{"mR/h", "milliroentgen per hour", "milliroentgens per hour", false},
	{"°C", "degree Celsius", "degrees Celsius", false},
	{"°F", "degree Fahrenheit", "degrees Fahrenheit", false},
	{"kPa", "kilopascal", "kilopascals", false},
	{"hPa", "hectopascal", "hectopascals", false},
	{"mbar", "millibar", "millibars", true},
	{"mm Al", "millimetre of aluminium", "millimetres of aluminium", true},
	{"mmAl", "millimetre of aluminium", "millimetres of aluminium", true},
	{"mm Cu", "millimetre of copper", "millimetres of copper", true},
	{"mm Pb", "millimetre of lead", "millimetres of lead", true},
	{"fL", "foot-lambert", "foot-lamberts", true},
	{"mm", "millimetre", "millimetres", true},
	{"cm", "centimetre", "centimetres", true},
	{"kVp", "kilovolt peak", "kilovolts peak", false},
	{"kV", "kilovolt", "kilovolts", true},
	{"mAs", "milliampere second", "milliampere seconds", true},
	{"mA", "milliampere", "milliamperes", true},
	{"ms", "millisecond", "milliseconds", true},
	{"min", "minute", "minutes", true},
	{"deg", "degree", "degrees", true},
	{"s", "second", "seconds", true},
	{"m", "metre", "metres", true},
	{"r", "of the radius", "of the radius", true},
	{"%", "percent", "percent", true},
	{"k_TP", "k T P", "k T P", false},
	{"RQA5", "R Q A 5", "R Q A 5", false},
	{"±", "plus or minus", "plus or minus", false},
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

// nounAfter are words before which a unit is an adjective and stays
// singular: "the 32 centimetre field".
var nounAfter = map[string]bool{"field": true, "mode": true, "filter": true, "disk": true, "dark": true, "reading": true,
	"aluminium": true, "copper": true, "lead": true, "phantom": true}

// earSpelling evens out spellings before the units are read: one micro
// sign, dashes and line breaks as pauses. Built once (a Replacer is safe
// for concurrent use).
var earSpelling = strings.NewReplacer(
	"μ", "µ", // Greek mu to micro sign
	"uGy", "µGy",
	" — ", ", ", " – ", ", ", "—", ", ", "–", ", ",
	"\t", " ", "\n", " ", "\r", " ",
)

// ForEar rewrites text written for the eye into text for a speech
// synthesiser: unit symbols become words ("cd/m²" → "candelas per square
// metre", "32cm field" → "32 centimetre field", "70 kV" → "70 kilovolts",
// "21 mm Al" → "21 millimetres of aluminium", "0.9 r" → "0.9 of the
// radius"), dashes become pauses, and characters a synthesiser reads badly
// (control characters) are dropped. A unit symbol is rewritten only when
// it stands alone (not inside a longer word), and short symbols such as
// "s", "m" and "r" only right after a number. A unit is said in the
// singular after the number 1, after "per" and before a noun it qualifies.
func ForEar(text string) string {
	text = earSpelling.Replace(text)
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
		if s < last {
			continue
		}
		form := earIndex[text[s:e]]
		before, _ := utf8.DecodeLastRuneInString(text[:s])
		after, _ := utf8.DecodeRuneInString(text[e:])
		if s == 0 {
			before = ' '
		}
		if e == len(text) {
			after = ' '
		}
		if unicode.IsLetter(before) || before == '_' || unicode.IsLetter(after) || unicode.IsDigit(after) || after == '_' || (after == '-' && form.afterNumber) {
			continue // part of a longer word
		}
		head := text[:s]
		if before == ' ' && s > 0 {
			head = text[:s-1]
		}
		num := trailingNumber(head)
		if form.afterNumber && num == "" {
			continue
		}
		said := form.many
		switch {
		case nounAfter[nextWord(text[e:])] && num != "":
			said = strings.Replace(form.one, " of ", " ", 1) // "the 21 millimetre aluminium filter"
		case num == "1" || num == "" || strings.HasSuffix(strings.TrimSpace(head), " per"):
			said = form.one
		}
		b.WriteString(text[last:s])
		if unicode.IsDigit(before) {
			b.WriteByte(' ')
		}
		b.WriteString(said)
		last = e
	}
	b.WriteString(text[last:])
	return strings.Join(strings.Fields(b.String()), " ")
}

// trailingNumber is the number text ends with ("0.5" of "up 0.5"), or "".
func trailingNumber(text string) string {
	i := len(text)
	for i > 0 {
		r, n := utf8.DecodeLastRuneInString(text[:i])
		if !unicode.IsDigit(r) && r != '.' && r != ',' {
			break
		}
		i -= n
	}
	num := strings.TrimLeft(text[i:], ".,")
	if num == "" || !unicode.IsDigit(rune(num[len(num)-1])) {
		return ""
	}
	if i > 0 {
		if r, _ := utf8.DecodeLastRuneInString(text[:i]); unicode.IsLetter(r) {
			return "" // a name such as "RQA5"
		}
	}
	return num
}

// nextWord is the first word of text, in lower case, without punctuation.
// It reads no further than that word: ForEar asks it at every unit, and
// splitting the whole rest of the text each time made ForEar quadratic in
// the text's length.
func nextWord(text string) string {
	text = strings.TrimLeftFunc(text, unicode.IsSpace)
	if i := strings.IndexFunc(text, unicode.IsSpace); i >= 0 {
		text = text[:i]
	}
	return strings.ToLower(strings.TrimFunc(text, func(r rune) bool { return !unicode.IsLetter(r) }))
}
