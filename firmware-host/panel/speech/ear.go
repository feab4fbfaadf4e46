package speech

import (
	"regexp"
	"strings"
	"unicode"
	"unicode/utf8"

	"kermalux/procedures/catalog"
)

// spoken is one written form and how it is said: one (after the number 1,
// before a noun such as "field", and after "per") and many (after any other
// number). Forms marked afterNumber are rewritten only right after a number
// ("6 s" but not the word "s"). feminine is the unit name's gender where the
// language has one that the number 1 agrees with ("eine Sekunde", "une
// seconde"). Unit names in English follow NIST SP 811 (2008) 9.3 and 9.7:
// the plural is formed on the unit name ("candelas per square metre",
// "micrograys per second"); spelled the British way, as the board speaks
// with an English voice.
type spoken struct {
	written     string
	one, many   string
	afterNumber bool
	feminine    bool
}

// earTable lists written forms in the order they are tried: longer forms
// first, so "µGy/s" wins over "µGy".
var earTable = []spoken{
	{"cd·m⁻²/(µGy·s⁻¹)", "candela per square metre per microgray per second", "candelas per square metre per microgray per second", false, false},
	{"cd/m²", "candela per square metre", "candelas per square metre", false, false},
	{"cd/m2", "candela per square metre", "candelas per square metre", false, false},
	{"cd·m⁻²", "candela per square metre", "candelas per square metre", false, false},
	{"µGy·s⁻¹", "microgray per second", "micrograys per second", false, false},
	{"µGy/s", "microgray per second", "micrograys per second", false, false},
	{"nGy/s", "nanogray per second", "nanograys per second", false, false},
	{"mGy/s", "milligray per second", "milligrays per second", false, false},
	{"µGy", "microgray", "micrograys", false, false},
	{"nGy", "nanogray", "nanograys", false, false},
	{"mGy", "milligray", "milligrays", false, false},
	{"mR/min", "milliroentgen per minute", "milliroentgens per minute", false, false},
	{"mR/s", "milliroentgen per second", "milliroentgens per second", false, false},
	{"mR/h", "milliroentgen per hour", "milliroentgens per hour", false, false},
	{"°C", "degree Celsius", "degrees Celsius", false, false},
	{"°F", "degree Fahrenheit", "degrees Fahrenheit", false, false},
	{"kPa", "kilopascal", "kilopascals", false, false},
	{"hPa", "hectopascal", "hectopascals", false, false},
	{"mbar", "millibar", "millibars", true, false},
	{"mm Al", "millimetre of aluminium", "millimetres of aluminium", true, false},
	{"mmAl", "millimetre of aluminium", "millimetres of aluminium", true, false},
	{"mm Cu", "millimetre of copper", "millimetres of copper", true, false},
	{"mm Pb", "millimetre of lead", "millimetres of lead", true, false},
	{"fL", "foot-lambert", "foot-lamberts", true, false},
	{"mm", "millimetre", "millimetres", true, false},
	{"cm", "centimetre", "centimetres", true, false},
	{"kVp", "kilovolt peak", "kilovolts peak", false, false},
	{"kV", "kilovolt", "kilovolts", true, false},
	{"mAs", "milliampere second", "milliampere seconds", true, false},
	{"mA", "milliampere", "milliamperes", true, false},
	{"ms", "millisecond", "milliseconds", true, false},
	{"min", "minute", "minutes", true, false},
	{"deg", "degree", "degrees", true, false},
	{"s", "second", "seconds", true, false},
	{"m", "metre", "metres", true, false},
	{"r", "of the radius", "of the radius", true, false},
	{"%", "percent", "percent", true, false},
	{"k_TP", "k T P", "k T P", false, false},
	{"RQA5", "R Q A 5", "R Q A 5", false, false},
	{"±", "plus or minus", "plus or minus", false, false},
}

// earRules are how one language says units and numbers.
type earRules struct {
	code    string
	table   []spoken
	pattern *regexp.Regexp
	index   map[string]spoken
	// nounAfter are words before which a unit is an adjective and stays
	// singular, its "of" dropped: "the 32 centimetre field" (English).
	nounAfter map[string]bool
	// per is the word of a compound unit after which a unit is singular.
	per string
	// plural tells whether a unit after the number num is said in the
	// plural; nil: after any number but 1.
	plural func(num string) bool
	// article, when set, is said instead of the number 1 before a unit
	// of that gender ("eine Sekunde").
	article func(feminine bool) string
	// decimal says a number with a decimal part (int, frac: its digits
	// before and after the separator); nil: left as written for the
	// synthesiser (English voices read "0.455" as "zero point four five
	// five").
	decimal func(int, frac string) string
	// minus is the word for a leading minus sign; "": left as written.
	minus string
}

func newRules(r earRules) *earRules {
	alts := make([]string, len(r.table))
	r.index = make(map[string]spoken, len(r.table))
	for i, s := range r.table {
		alts[i] = regexp.QuoteMeta(s.written)
		r.index[s.written] = s
	}
	r.pattern = regexp.MustCompile(strings.Join(alts, "|"))
	return &r
}

// english are the English rules: ForEar and a nil *Ear.
var english = newRules(earRules{code: "en", table: earTable, per: "per",
	nounAfter: map[string]bool{"field": true, "mode": true, "filter": true, "disk": true, "dark": true, "reading": true,
		"aluminium": true, "copper": true, "lead": true, "phantom": true}})

// earSpelling evens out spellings before the units are read: one micro
// sign, dashes and line breaks as pauses. Built once (a Replacer is safe
// for concurrent use).
var earSpelling = strings.NewReplacer(
	"μ", "µ", // Greek mu to micro sign
	"uGy", "µGy",
	" — ", ", ", " – ", ", ", "—", ", ", "–", ", ",
	"\t", " ", "\n", " ", "\r", " ",
)

// ForEar rewrites English text written for the eye into text for a speech
// synthesiser: unit symbols become words ("cd/m²" → "candelas per square
// metre", "32cm field" → "32 centimetre field", "70 kV" → "70 kilovolts",
// "21 mm Al" → "21 millimetres of aluminium", "0.9 r" → "0.9 of the
// radius"), dashes become pauses, and characters a synthesiser reads badly
// (control characters) are dropped. A unit symbol is rewritten only when
// it stands alone (not inside a longer word), and short symbols such as
// "s", "m" and "r" only right after a number. A unit is said in the
// singular after the number 1, after "per" and before a noun it qualifies.
// Ear.ForEar does the same in another language.
func ForEar(text string) string { return english.forEar(text) }

func (l *earRules) forEar(text string) string {
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
	for _, loc := range l.pattern.FindAllStringIndex(text, -1) {
		s, e := loc[0], loc[1]
		if s < last {
			continue
		}
		form := l.index[text[s:e]]
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
		case l.nounAfter[nextWord(text[e:])] && num != "":
			said = strings.Replace(form.one, " of ", " ", 1) // "the 21 millimetre aluminium filter"
		case num == "" || strings.HasSuffix(strings.TrimSpace(head), " "+l.per):
			said = form.one
		case l.plural == nil && num == "1", l.plural != nil && !l.plural(num):
			said = form.one
		}
		numStart := len(head) - len(num)
		if l.article != nil && num == "1" && numStart >= last && (numStart == 0 || head[numStart-1] == ' ' || head[numStart-1] == '(') {
			// "1 s" is "eine Sekunde", "une seconde".
			b.WriteString(text[last:numStart])
			b.WriteString(l.article(form.feminine))
			b.WriteByte(' ')
			b.WriteString(said)
			last = e
			continue
		}
		b.WriteString(text[last:s])
		if unicode.IsDigit(before) {
			b.WriteByte(' ')
		}
		b.WriteString(said)
		last = e
	}
	b.WriteString(text[last:])
	out := b.String()
	if l.decimal != nil || l.minus != "" {
		out = l.numbers(out)
	}
	return strings.Join(strings.Fields(out), " ")
}

// numberPattern is a number standing alone: what comes before it (not a
// letter or digit), a minus sign, the digits, and a decimal part after a
// comma or a point.
var numberPattern = regexp.MustCompile(`(^|[^\p{L}\p{N}_.,])([-−]?)([0-9]+)(?:[.,]([0-9]+))?\b`)

// numbers says the numbers of text the language's way: a decimal part
// with the language's decimal word, a minus sign as a word. The board
// writes no thousands separators, so a comma or a point between digits is
// the decimal separator (the engine writes the language's own; a value
// offered by a panel comes with a point). A run such as "1.2.3" (a
// version, a date) is no number and is left as written.
func (l *earRules) numbers(text string) string {
	var b strings.Builder
	last := 0
	for _, m := range numberPattern.FindAllStringSubmatchIndex(text, -1) {
		end := m[1]
		if rest := text[end:]; len(rest) > 1 && (rest[0] == '.' || rest[0] == ',') && rest[1] >= '0' && rest[1] <= '9' {
			continue
		}
		b.WriteString(text[last:m[3]]) // up to and with what comes before
		if m[4] < m[5] {
			if l.minus == "" {
				b.WriteString(text[m[4]:m[5]])
			} else {
				b.WriteString(l.minus + " ")
			}
		}
		whole := text[m[6]:m[7]]
		switch {
		case m[8] < 0:
			b.WriteString(whole)
		case l.decimal == nil:
			b.WriteString(text[m[6]:end])
		default:
			b.WriteString(l.decimal(whole, text[m[8]:m[9]]))
		}
		last = end
	}
	b.WriteString(text[last:])
	return b.String()
}

// Ear rewrites written text for the ear in one language: its unit words,
// plurals, decimal word and the voice that speaks it. A nil *Ear is
// English (ForEar).
type Ear struct {
	rules *earRules
	msgs  *catalog.Catalog
}

// NewEar returns the ear of a catalog's language (nil: English). A
// language without rules of its own here is read with the English unit
// words, as was the case before there were languages; its texts still
// come from its catalog.
func NewEar(c *catalog.Catalog) *Ear {
	r := english
	if lr, ok := earLanguages[c.Code()]; ok {
		r = lr
	}
	return &Ear{rules: r, msgs: c}
}

// ForEar rewrites text for the synthesiser the way the ear's language
// says it (see ForEar for English).
func (e *Ear) ForEar(text string) string {
	if e == nil {
		return english.forEar(text)
	}
	return e.rules.forEar(text)
}

// Text is the panel's own text src in the ear's language (src itself in
// English or without a translation).
func (e *Ear) Text(src string) string {
	if e == nil {
		return src
	}
	return e.msgs.Text(src)
}

// Number writes a number written with a decimal point ("0.455") with the
// ear's language's decimal separator.
func (e *Ear) Number(s string) string {
	if e == nil {
		return s
	}
	return e.msgs.Number(s)
}

// Voice is the espeak-ng voice of the ear's language; "" for English (the
// bench's voice, or espeak-ng's default).
func (e *Ear) Voice() string {
	if e == nil || e.msgs.IsEnglish() {
		return ""
	}
	if e.msgs.Voice != "" {
		return e.msgs.Voice
	}
	return e.msgs.Code()
}

// Language is the ear's language code.
func (e *Ear) Language() string {
	if e == nil {
		return catalog.English
	}
	return e.msgs.Code()
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
