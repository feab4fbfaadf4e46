package live

import (
	"context"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"kermalux/drivers/clock"
	"kermalux/firmware-host/demo"
	"kermalux/procedures/catalog"
	"kermalux/procedures/engine"
	"kermalux/procedures/entry"
)

// Every text of the live page and its script has a translation in each
// built-in language (a new English text on the page fails here until the
// catalogs have it).
func TestPageTextsInEveryLanguage(t *testing.T) {
	t.Parallel()
	texts := PageTexts()
	if len(texts) < 40 {
		t.Fatalf("only %d page texts found: the templates' {{t}} calls were not read", len(texts))
	}
	for _, l := range catalog.Languages()[1:] {
		c, err := catalog.Builtin(l)
		if err != nil {
			t.Fatal(err)
		}
		for _, s := range texts {
			if _, ok := c.Lookup(s); !ok {
				t.Errorf("%s: the live page's %q has no translation", l, s)
			}
		}
	}
}

// A German live view: the pairing form and the page in German (the
// radiation-safety caution among them), the script given its German
// texts and the decimal comma, the steps' texts and a result's deciding
// limit sent in German, the announcement said in German. The expected
// German is written by hand (procedures/catalog/lang/de).
func TestLiveViewInGerman(t *testing.T) {
	t.Parallel()
	de, err := catalog.Builtin("de")
	if err != nil {
		t.Fatal(err)
	}
	clk := clock.NewManual(time.Date(2026, 9, 1, 9, 0, 0, 0, time.UTC))
	hub := NewHub(0)
	j := NewJournal(demo.NewMemJournal(clk), hub, clk)
	srv, err := NewServer(hub, j, Options{Log: quiet, Code: "417209", Token: "feedc0ffee", Messages: de,
		Procedure: engine.Procedure{Name: "p", Title: "Room temperature and pressure",
			Steps: []engine.Step{{ID: "a", Kind: engine.Prepare, Text: "Release the beam."}}}})
	if err != nil {
		t.Fatal(err)
	}
	ts := httptest.NewServer(srv)
	t.Cleanup(ts.Close)

	c := client(t)
	resp, body := get(t, c, ts.URL+"/")
	if resp.StatusCode != http.StatusUnauthorized {
		t.Fatalf("unpaired: %s", resp.Status)
	}
	for _, want := range []string{`<html lang="de">`, "Mit dem Gerät koppeln", `placeholder="6-stelliger Code"`, ">Koppeln</button>"} {
		if !strings.Contains(body, want) {
			t.Errorf("pairing form lacks %q:\n%s", want, body)
		}
	}
	if resp, _ := get(t, c, ts.URL+"/pair?code=417209"); resp.StatusCode != http.StatusSeeOther {
		t.Fatalf("pairing: %s", resp.Status)
	}
	_, body = get(t, c, ts.URL+"/")
	for _, want := range []string{`<html lang="de">`, "<h2>Sicherheitsbestätigungen</h2>", "von 5:00 insgesamt",
		"Röntgenstrahlung kann Menschen schaden: Es gelten die örtlichen Vorschriften",
		`"decimal":","`, `"Step %d of %d":"Schritt %d von %d"`, `"conversion_factor":"Konversionsfaktor"`} {
		if !strings.Contains(body, want) {
			t.Errorf("page lacks %q", want)
		}
	}
	if strings.Contains(body, "Safety acknowledgements") {
		t.Errorf("page still shows English headings")
	}

	ctx := context.Background()
	id, _ := j.Begin(ctx, entry.Session{Site: "Ostrelby General"})
	_, _ = j.Append(ctx, id, entry.KindResult, entry.Result{Quantity: "conversion_factor", Value: 151, Verdict: "pass", DecidedBy: "specification minimum 0.5 %"})
	_, _ = j.Append(ctx, id, entry.KindEvent, entry.Event{Name: "reading_error", Detail: "the reading did not settle within its beam-on limit"})
	req, _ := http.NewRequestWithContext(ctx, http.MethodGet, ts.URL+"/events", nil)
	resp, err = c.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	ch := stream(resp)
	if ev := next(t, ch); ev.kind != "live_hello" || !strings.Contains(ev.data, `"Strahlung beenden"`) || !strings.Contains(ev.data, `"Raumtemperatur und Luftdruck"`) {
		t.Errorf("hello not in German: %s", ev.data)
	}
	next(t, ch) // the session
	if ev := next(t, ch); ev.kind != "result" || !strings.Contains(ev.data, `"decided_by":"untere Spezifikationsgrenze 0,5 %"`) {
		t.Errorf("result's deciding limit not in German: %s", ev.data)
	}
	if ev := next(t, ch); ev.kind != "event" || !strings.Contains(ev.data, `"detail":"der Messwert hat sich innerhalb seiner Strahlzeitgrenze nicht stabilisiert"`) {
		t.Errorf("event's detail not in German: %s", ev.data)
	}

	v, err := Listen("127.0.0.1:0", Options{Log: quiet, Code: "417209", Messages: de})
	if err != nil {
		t.Fatal(err)
	}
	defer v.Close()
	if _, _, err := v.Wrap(j, nil, clk); err != nil {
		t.Fatal(err)
	}
	port := strings.TrimPrefix(v.Addr().String(), "127.0.0.1:")
	want := "Live-Ansicht eingeschaltet. Kopplungscode 4 1 7 2 0 9. 127.0.0.1 Port " + port + " im Browser öffnen."
	if got := v.Announcement().Text; got != want {
		t.Errorf("announcement\n got %q\nwant %q", got, want)
	}
}
