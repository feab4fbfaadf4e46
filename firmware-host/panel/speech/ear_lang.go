package speech

import (
	"strconv"
	"strings"
)

// How German and French say units and numbers. Unit names are the SI
// Brochure's (BIPM, 9th edition 2019, its French text and the German
// translation of the PTB, tables 2, 4 and 7: candela, gray, pascal, mètre /
// Meter, degré Celsius / Grad Celsius, and the prefixes micro / Mikro,
// milli, nano, kilo, hecto / Hekto), from memory; the names of the filter
// metals, the roentgen, the foot-lambert, "kVp" and "r" (a fraction of the
// field's radius) are common practice.

// earLanguages are the languages with rules of their own; any other is
// read with the English rules.
var earLanguages = map[string]*earRules{"de": german, "fr": french}

// German: masculine and neuter units of measure keep the singular after a
// number (5 Meter, 3 Kilovolt, 10 Grad, 2 Mikrogray); feminine ones take
// the plural after any number but 1 (2 Sekunden, 0,5 Sekunden, 1,5
// Minuten), and 1 before a unit is "ein" or "eine" (Duden, Richtiges und
// gutes Deutsch, on Maß- und Mengenangaben; from memory; the article is
// always the nominative's: "nach 1 min" is said "nach eine Minute", where
// German wants the dative "einer"). A decimal is said
// with "Komma" and the digits after it one by one ("0,455": null Komma
// vier fünf fünf; Duden, on Zahlen, from memory).
var german = newRules(earRules{code: "de", per: "pro",
	table: []spoken{
		{"cd·m⁻²/(µGy·s⁻¹)", "Candela pro Quadratmeter pro Mikrogray pro Sekunde", "Candela pro Quadratmeter pro Mikrogray pro Sekunde", false, true},
		{"cd/m²", "Candela pro Quadratmeter", "Candela pro Quadratmeter", false, true},
		{"cd/m2", "Candela pro Quadratmeter", "Candela pro Quadratmeter", false, true},
		{"cd·m⁻²", "Candela pro Quadratmeter", "Candela pro Quadratmeter", false, true},
		{"µGy·s⁻¹", "Mikrogray pro Sekunde", "Mikrogray pro Sekunde", false, false},
		{"µGy/s", "Mikrogray pro Sekunde", "Mikrogray pro Sekunde", false, false},
		{"nGy/s", "Nanogray pro Sekunde", "Nanogray pro Sekunde", false, false},
		{"mGy/s", "Milligray pro Sekunde", "Milligray pro Sekunde", false, false},
		{"µGy", "Mikrogray", "Mikrogray", false, false},
		{"nGy", "Nanogray", "Nanogray", false, false},
		{"mGy", "Milligray", "Milligray", false, false},
		{"mR/min", "Milliröntgen pro Minute", "Milliröntgen pro Minute", false, false},
		{"mR/s", "Milliröntgen pro Sekunde", "Milliröntgen pro Sekunde", false, false},
		{"mR/h", "Milliröntgen pro Stunde", "Milliröntgen pro Stunde", false, false},
		{"°C", "Grad Celsius", "Grad Celsius", false, false},
		{"°F", "Grad Fahrenheit", "Grad Fahrenheit", false, false},
		{"kPa", "Kilopascal", "Kilopascal", false, false},
		{"hPa", "Hektopascal", "Hektopascal", false, false},
		{"mbar", "Millibar", "Millibar", true, false},
		{"mm Al", "Millimeter Aluminium", "Millimeter Aluminium", true, false},
		{"mmAl", "Millimeter Aluminium", "Millimeter Aluminium", true, false},
		{"mm Cu", "Millimeter Kupfer", "Millimeter Kupfer", true, false},
		{"mm Pb", "Millimeter Blei", "Millimeter Blei", true, false},
		{"fL", "Foot-Lambert", "Foot-Lambert", true, false},
		{"mm", "Millimeter", "Millimeter", true, false},
		{"cm", "Zentimeter", "Zentimeter", true, false},
		{"kVp", "Kilovolt Scheitelwert", "Kilovolt Scheitelwert", false, false},
		{"kV", "Kilovolt", "Kilovolt", true, false},
		{"mAs", "Milliamperesekunde", "Milliamperesekunden", true, true},
		{"mA", "Milliampere", "Milliampere", true, false},
		{"ms", "Millisekunde", "Millisekunden", true, true},
		{"min", "Minute", "Minuten", true, true},
		{"deg", "Grad", "Grad", true, false},
		{"s", "Sekunde", "Sekunden", true, true},
		{"m", "Meter", "Meter", true, false},
		{"r", "Radius", "Radius", true, false},
		{"%", "Prozent", "Prozent", true, false},
		{"k_TP", "k T P", "k T P", false, false},
		{"RQA5", "R Q A 5", "R Q A 5", false, false},
		{"±", "plus minus", "plus minus", false, false},
	},
	article: func(feminine bool) string {
		if feminine {
			return "eine"
		}
		return "ein"
	},
	decimal: func(whole, frac string) string {
		return whole + " Komma " + digitWords(frac, germanDigits)
	},
	minus: "minus",
})

// French: a unit name takes the plural from 2 on, so 0,5 and 1,5 are
// singular (1,5 mètre; Académie française, on the plural after a decimal
// number, and the SI Brochure's French text, 5.4.x, on unit names taking
// the plural; from memory); compound names put the plural on the first
// word (micrograys par seconde), and 1 before a unit is "un" or "une". A
// decimal is said with "virgule", the part after it as a number ("0,455":
// zéro virgule quatre cent cinquante-cinq), each leading zero said
// ("0,05": zéro virgule zéro cinq), and digit by digit when it is longer
// than three digits (common practice).
var french = newRules(earRules{code: "fr", per: "par",
	table: []spoken{
		{"cd·m⁻²/(µGy·s⁻¹)", "candela par mètre carré par microgray par seconde", "candelas par mètre carré par microgray par seconde", false, true},
		{"cd/m²", "candela par mètre carré", "candelas par mètre carré", false, true},
		{"cd/m2", "candela par mètre carré", "candelas par mètre carré", false, true},
		{"cd·m⁻²", "candela par mètre carré", "candelas par mètre carré", false, true},
		{"µGy·s⁻¹", "microgray par seconde", "micrograys par seconde", false, false},
		{"µGy/s", "microgray par seconde", "micrograys par seconde", false, false},
		{"nGy/s", "nanogray par seconde", "nanograys par seconde", false, false},
		{"mGy/s", "milligray par seconde", "milligrays par seconde", false, false},
		{"µGy", "microgray", "micrograys", false, false},
		{"nGy", "nanogray", "nanograys", false, false},
		{"mGy", "milligray", "milligrays", false, false},
		{"mR/min", "milliroentgen par minute", "milliroentgens par minute", false, false},
		{"mR/s", "milliroentgen par seconde", "milliroentgens par seconde", false, false},
		{"mR/h", "milliroentgen par heure", "milliroentgens par heure", false, false},
		{"°C", "degré Celsius", "degrés Celsius", false, false},
		{"°F", "degré Fahrenheit", "degrés Fahrenheit", false, false},
		{"kPa", "kilopascal", "kilopascals", false, false},
		{"hPa", "hectopascal", "hectopascals", false, false},
		{"mbar", "millibar", "millibars", true, false},
		{"mm Al", "millimètre d'aluminium", "millimètres d'aluminium", true, false},
		{"mmAl", "millimètre d'aluminium", "millimètres d'aluminium", true, false},
		{"mm Cu", "millimètre de cuivre", "millimètres de cuivre", true, false},
		{"mm Pb", "millimètre de plomb", "millimètres de plomb", true, false},
		{"fL", "foot-lambert", "foot-lamberts", true, false},
		{"mm", "millimètre", "millimètres", true, false},
		{"cm", "centimètre", "centimètres", true, false},
		{"kVp", "kilovolt crête", "kilovolts crête", false, false},
		{"kV", "kilovolt", "kilovolts", true, false},
		{"mAs", "milliampère-seconde", "milliampères-secondes", true, false},
		{"mA", "milliampère", "milliampères", true, false},
		{"ms", "milliseconde", "millisecondes", true, true},
		{"min", "minute", "minutes", true, true},
		{"deg", "degré", "degrés", true, false},
		{"s", "seconde", "secondes", true, true},
		{"m", "mètre", "mètres", true, false},
		{"r", "rayon", "rayons", true, false},
		{"%", "pour cent", "pour cent", true, false},
		{"k_TP", "k T P", "k T P", false, false},
		{"RQA5", "R Q A 5", "R Q A 5", false, false},
		{"±", "plus ou moins", "plus ou moins", false, false},
	},
	plural: func(num string) bool {
		x, err := strconv.ParseFloat(strings.Replace(num, ",", ".", 1), 64)
		return err != nil || x >= 2
	},
	article: func(feminine bool) string {
		if feminine {
			return "une"
		}
		return "un"
	},
	decimal: func(whole, frac string) string {
		rest := strings.TrimLeft(frac, "0")
		said := strings.TrimSpace(strings.Repeat("zéro ", len(frac)-len(rest)))
		switch {
		case rest == "":
		case len(rest) <= 3:
			said += " " + rest
		default:
			said += " " + digitWords(rest, frenchDigits)
		}
		return whole + " virgule " + strings.TrimSpace(said)
	},
	minus: "moins",
})

var (
	germanDigits = [10]string{"null", "eins", "zwei", "drei", "vier", "fünf", "sechs", "sieben", "acht", "neun"}
	frenchDigits = [10]string{"zéro", "un", "deux", "trois", "quatre", "cinq", "six", "sept", "huit", "neuf"}
)

// digitWords says each digit of s as a word.
func digitWords(s string, words [10]string) string {
	out := make([]string, 0, len(s))
	for _, r := range s {
		if r >= '0' && r <= '9' {
			out = append(out, words[r-'0'])
		}
	}
	return strings.Join(out, " ")
}
