package live

import (
	"bytes"
	"encoding/json"
	"fmt"
	"html/template"
	"strings"

	"kermalux/procedures/catalog"
)

// The page's own texts in the engineer's language. The HTML files are
// templates whose texts are written {{t "English"}}; the script's texts
// (pageScriptTexts) and the names of figures, meters, verdicts and values
// (pageNames) go to the page as JSON in the page itself (read by the
// script, never run: the page's content security policy allows no inline
// script). What the board said is journalled in its language already;
// the steps' texts, the title and the journalled reasons (which limit
// decided, why a retake) are translated by the server as it sends them.

// pageScriptTexts are the English texts app.js shows (its t() and tf()).
var pageScriptTexts = []string{
	"Warning: %s", "cumulative beam-on near the alarm", "ALARM: %s", "five minutes of beam-on",
	"Stopped: kerma rate far out of range", "All steps done.", "Session %s.", "the end",
	"the results, then the end", "waiting for the board…", "Step %d of %d", "no session yet",
	"BEAM ON", "beam off", "of %s cumulative", "no readings yet", "used", "settling or dark",
	"not entered yet", "none computed yet", "Figure", "Value ± U", "Verdict", "Decided by",
	"not measurable", "(not calibrated)", "none", "step %d", "none yet", "live", "reconnecting", "retaken",
}

// pageNames are the journal's keys the page shows as words, with their
// English names (those of the engine's catalog where it has them).
var pageNames = map[string]string{
	"conversion_factor": "Conversion factor", "luminance_non_uniformity": "Luminance non-uniformity",
	"contrast_ratio": "Contrast ratio", "non_uniformity": "Luminance non-uniformity", "input_kerma_rate": "Input air kerma rate",
	"kerma_rate_scaling": "Kerma rate scaling", "dark_level": "Dark level", "stability": "Stability",
	"dosimeter": "Dosimeter", "photometer": "Photometer",
	"temperature": "Temperature", "pressure": "Pressure", "humidity": "Humidity",
	"pass": "pass", "fail": "fail", "info": "info", "not_measurable": "not measurable",
	"sensor": "sensor", "operator": "operator", "aborted": "aborted", "paused": "paused",
	"samples_discarded": "samples discarded", "meter_lost": "meter lost", "meter_back": "meter back",
	"reading_error": "reading error",
}

// pageTexts is what the page needs of the language: its code, the decimal
// separator, and the script's texts and the names translated (only those
// the catalog has; the page shows the English of any other).
type pageTexts struct {
	Lang    string            `json:"lang"`
	Decimal string            `json:"decimal"`
	Texts   map[string]string `json:"texts"`
	Names   map[string]string `json:"names"`
}

// page is one HTML page rendered in a language.
type renderedPages struct {
	index, pair []byte
}

// renderPages renders the page templates in the catalog's language.
func renderPages(c *catalog.Catalog) (renderedPages, error) {
	pt := pageTexts{Lang: c.Code(), Decimal: ".", Texts: map[string]string{}, Names: map[string]string{}}
	if !c.IsEnglish() {
		pt.Decimal = c.Decimal
		for _, s := range pageScriptTexts {
			if tr, ok := c.Lookup(s); ok {
				pt.Texts[s] = tr
			}
		}
		for k, en := range pageNames {
			if tr, ok := c.Lookup(en); ok {
				pt.Names[k] = tr
			}
		}
	}
	js, err := json.Marshal(pt)
	if err != nil {
		return renderedPages{}, err
	}
	funcs := template.FuncMap{"t": c.Text}
	var out renderedPages
	for _, p := range []struct {
		name string
		dst  *[]byte
	}{{"page/index.html", &out.index}, {"page/pair.html", &out.pair}} {
		src, err := pageFS.ReadFile(p.name)
		if err != nil {
			return renderedPages{}, fmt.Errorf("live: %w", err)
		}
		tm, err := template.New(p.name).Funcs(funcs).Parse(string(src))
		if err != nil {
			return renderedPages{}, fmt.Errorf("live: %s: %w", p.name, err)
		}
		var b bytes.Buffer
		if err := tm.Execute(&b, struct {
			Lang  string
			Texts template.JS
		}{pt.Lang, template.JS(js)}); err != nil {
			return renderedPages{}, fmt.Errorf("live: %s: %w", p.name, err)
		}
		*p.dst = b.Bytes()
	}
	return out, nil
}

// translatePayload rewrites the texts of a journal record the page shows
// that the engine journals in English (a result's deciding limit, a
// retake's reason, an event's detail) into the catalog's language. Anything else, and a
// record it cannot read, is returned as it is.
func translatePayload(c *catalog.Catalog, data []byte) []byte {
	if c.IsEnglish() || !(bytes.Contains(data, []byte(`"decided_by"`)) || bytes.Contains(data, []byte(`"reason"`)) || bytes.Contains(data, []byte(`"detail"`))) {
		return data
	}
	var w map[string]json.RawMessage
	if err := json.Unmarshal(data, &w); err != nil {
		return data
	}
	var p map[string]any
	if err := json.Unmarshal(w["payload"], &p); err != nil {
		return data
	}
	changed := false
	for _, k := range []string{"decided_by", "reason", "detail"} {
		if s, ok := p[k].(string); ok && s != "" {
			words := strings.ReplaceAll(s, "_", " ")
			if tr, ok := c.TranslateWhole(words); ok {
				p[k], changed = tr, true
			}
		}
	}
	if !changed {
		return data
	}
	pb, err := json.Marshal(p)
	if err != nil {
		return data
	}
	w["payload"] = pb
	out, err := json.Marshal(w)
	if err != nil {
		return data
	}
	return out
}
