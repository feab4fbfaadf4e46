package speech

import (
	"regexp"
	"strings"
	"testing"

	"kermalux/procedures/catalog"
	"kermalux/procedures/panel"
)

func ear(t *testing.T, lang string) *Ear {
	t.Helper()
	c, err := catalog.Builtin(lang)
	if err != nil {
		t.Fatal(err)
	}
	return NewEar(c)
}

// What a German and a French board say, written out by hand. Sources:
// unit names from the SI Brochure (BIPM, 9th edition 2019: its French
// text, and the PTB's German translation, tables 2, 4 and 7), from
// memory; German plurals (masculine and neuter units keep the singular
// after a number, feminine ones take the plural: 5 Meter, 2 Mikrogray, 6
// Sekunden) and decimals said "Komma" with the digits after it one by one,
// from Duden (Richtiges und gutes Deutsch), from memory; French plurals
// from 2 on (1,5 mètre) from the Académie française's advice, from
// memory; French decimals said "virgule" with the part after it as a
// number and its leading zeros said, common practice. The filter metals,
// the roentgen, the foot-lambert and "r" (a fraction of the radius) are
// common practice.
func TestForEarInGermanAndFrench(t *testing.T) {
	t.Parallel()
	tests := map[string][]struct{ in, want string }{
		"de": {
			{"Eingangs-Kermaleistung: 0,455 µGy/s.", "Eingangs-Kermaleistung: 0 Komma vier fünf fünf Mikrogray pro Sekunde."},
			{"Konversionsfaktor: 151 cd/m² pro µGy/s.", "Konversionsfaktor: 151 Candela pro Quadratmeter pro Mikrogray pro Sekunde."},
			{"151 cd·m⁻²/(µGy·s⁻¹)", "151 Candela pro Quadratmeter pro Mikrogray pro Sekunde"},
			{"Leuchtdichte 102 cd/m²", "Leuchtdichte 102 Candela pro Quadratmeter"},
			{"Strahlung seit 6 s.", "Strahlung seit 6 Sekunden."},
			{"Noch 1 s.", "Noch eine Sekunde."},
			{"Noch 0,5 s.", "Noch 0 Komma fünf Sekunden."},
			{"nach 4 min 30 s", "nach 4 Minuten 30 Sekunden"},
			{"RQA5: 70 kV, 21 mm Al.", "R Q A 5: 70 Kilovolt, 21 Millimeter Aluminium."},
			{"Position 3 von 13: oben 0,5 r.", "Position 3 von 13: oben 0 Komma fünf Radius."},
			{"Feld 32cm wählen.", "Feld 32 Zentimeter wählen."},
			{"Raumluft 21,5 °C, 101,3 kPa", "Raumluft 21 Komma fünf Grad Celsius, 101 Komma drei Kilopascal"},
			{"Ungleichförmigkeit 8,3 %", "Ungleichförmigkeit 8 Komma drei Prozent"},
			{"Bleischeibe 1 mm.", "Bleischeibe ein Millimeter."},
			{"1 fL sind 3,426 cd/m².", "ein Foot-Lambert sind 3 Komma vier zwei sechs Candela pro Quadratmeter."},
			{"Dosimeter zeigte 5,1 mR/s.", "Dosimeter zeigte 5 Komma eins Milliröntgen pro Sekunde."},
			{"152 ± 4", "152 plus minus 4"},
			{"Temperatur -0,3 °C", "Temperatur minus 0 Komma drei Grad Celsius"},
			{"k_TP 1,012", "k T P 1 Komma null eins zwei"},
			{"Temperatur 23.5 °C.", "Temperatur 23 Komma fünf Grad Celsius."}, // a value a panel offers, written with a point
			{"Zeile 2 von 4. Tür zu.", "Zeile 2 von 4. Tür zu."},
			{"Taste s drücken", "Taste s drücken"},
		},
		"fr": {
			{"Débit de kerma d'entrée : 0,455 µGy/s.", "Débit de kerma d'entrée : 0 virgule 455 microgray par seconde."},
			{"Débit 2,5 µGy/s.", "Débit 2 virgule 5 micrograys par seconde."},
			{"Facteur de conversion : 151 cd/m² par µGy/s.", "Facteur de conversion : 151 candelas par mètre carré par microgray par seconde."},
			{"Rayonnement depuis 6 s.", "Rayonnement depuis 6 secondes."},
			{"Encore 1 s.", "Encore une seconde."},
			{"après 1,5 min", "après 1 virgule 5 minute"},
			{"après 4 min 30 s", "après 4 minutes 30 secondes"},
			{"RQA5 : 70 kV, 21 mm Al.", "R Q A 5 : 70 kilovolts, 21 millimètres d'aluminium."},
			{"Position 3 sur 13 : en haut 0,5 r.", "Position 3 sur 13 : en haut 0 virgule 5 rayon."},
			{"Sélectionnez le champ 32cm.", "Sélectionnez le champ 32 centimètres."},
			{"Air ambiant 21,5 °C, 101,3 kPa", "Air ambiant 21 virgule 5 degrés Celsius, 101 virgule 3 kilopascals"},
			{"Non-uniformité 0,05 %", "Non-uniformité 0 virgule zéro 5 pour cent"},
			{"Disque de plomb 1 mm.", "Disque de plomb un millimètre."},
			{"1 fL vaut 3,426 cd/m².", "un foot-lambert vaut 3 virgule 426 candelas par mètre carré."},
			{"k_TP 1,0123", "k T P 1 virgule zéro 123"},
			{"k_TP 1,01234", "k T P 1 virgule zéro un deux trois quatre"},
			{"152 ± 4", "152 plus ou moins 4"},
			{"Température -0,3 °C", "Température moins 0 virgule 3 degré Celsius"},
			{"Température 23.5 °C.", "Température 23 virgule 5 degrés Celsius."},
			{"Tapez s pour passer", "Tapez s pour passer"},
		},
	}
	for lang, cases := range tests {
		e := ear(t, lang)
		for _, tc := range cases {
			if got := e.ForEar(tc.in); got != tc.want {
				t.Errorf("%s: ForEar(%q)\n got %q\nwant %q", lang, tc.in, got, tc.want)
			}
		}
	}
}

// Every text of the built-in German and French catalogs that the board
// says (the report's are only read), its values filled
// with numbers as the engine writes them in that language, reaches the
// synthesiser with no unit symbol, no number written with a decimal
// separator and none of the English unit words.
func TestCatalogTextsByEar(t *testing.T) {
	t.Parallel()
	symbols := regexp.MustCompile(`\d\s?(?:µGy|cd/m|cd·|mm|cm|kV|kPa|hPa|°C|%|s|r|min|ms|mR)(?:$|[\s.,;:!?)])|µ|°|±|²|⁻|\d[.,]\d`)
	// English unit words that German and French spell otherwise.
	englishUnits := regexp.MustCompile(`\b(?:per|square metres?|metres?|seconds?|percent|of the radius|degrees?)\b`)
	for _, lang := range catalog.Languages()[1:] {
		c, err := catalog.Builtin(lang)
		if err != nil {
			t.Fatal(err)
		}
		e := NewEar(c)
		fill := regexp.MustCompile(`%(?:\[\d\])?[-+# 0-9.]*[a-zA-Z]`)
		for _, src := range c.Sources() {
			if file, _ := c.Where(src); strings.HasSuffix(file, "/report.yaml") || strings.HasSuffix(file, "/terminal.yaml") {
				continue // the report's and the terminal's texts are read, never spoken
			}
			tr, _ := c.Lookup(src)
			text := strings.ReplaceAll(tr, "%%", "\x00")
			text = strings.ReplaceAll(fill.ReplaceAllString(text, c.Number("0.455")), "{mode}", "32cm")
			text = strings.ReplaceAll(text, "\x00", "%")
			got := e.ForEar(text)
			if m := symbols.FindString(got); m != "" {
				t.Errorf("%s: %q is said %q: %q left", lang, text, got, m)
			}
			if m := englishUnits.FindString(got); m != "" {
				t.Errorf("%s: %q is said %q: English %q", lang, text, got, m)
			}
		}
	}
}

// A foot-switch board offers a value in its language: the number said
// its way and the cue from the panel catalog, the script's own closing
// cue not said twice.
func TestPromptTextOffersInLanguage(t *testing.T) {
	t.Parallel()
	pr := panel.Prompt{Message: panel.Message{Text: "Raumtemperatur ablesen. Zum Übernehmen drücken."},
		Value: &panel.ValueRequest{Name: "temperature", Unit: "°C", Default: 21.5, HasDefault: true}}
	want := "Raumtemperatur ablesen. 21 Komma fünf Grad Celsius. Zum Übernehmen drücken."
	if got := ear(t, "de").PromptText(pr, true); got != want {
		t.Errorf("German offer\n got %q\nwant %q", got, want)
	}
	pr.Text = "Lisez la température de la salle."
	want = "Lisez la température de la salle. 21 virgule 5 degrés Celsius. Appuyez pour accepter."
	if got := ear(t, "fr").PromptText(pr, true); got != want {
		t.Errorf("French offer\n got %q\nwant %q", got, want)
	}
}
