package bench

import (
	"context"
	"os"
	"testing"
	"time"

	"kermalux/drivers/benchsim"
	"kermalux/drivers/clock"
	"kermalux/drivers/units"
)

// The demo bench file's meters open over real pseudo-terminals served by
// the simulator, with the ports given at run time, and read in canonical
// units through the real drivers.
func TestOpenMetersOnSimulator(t *testing.T) {
	if testing.Short() {
		t.Skip("pseudo-terminals")
	}
	scn, err := benchsim.LoadScenario("../../testdata/scenarios/tollemby-rise-room2.yaml")
	if err != nil {
		t.Fatal(err)
	}
	clk := clock.NewScaled(5, time.Date(2026, 3, 4, 9, 0, 0, 0, time.UTC))
	sim, err := benchsim.New(scn, clk)
	if err != nil {
		t.Fatal(err)
	}
	defer sim.Close()
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	ports, err := sim.Serve(ctx, t.TempDir())
	if err != nil {
		if os.IsPermission(err) {
			t.Skip(err)
		}
		t.Fatal(err)
	}
	b, err := Load("../../testdata/bench/demo-sim.yaml")
	if err != nil {
		t.Fatal(err)
	}
	meters, err := OpenMeters(ctx, b, clk, map[string]string{"dosimeter": ports.Dosimeter.Link, "photometer": ports.Photometer.Link})
	if err != nil {
		t.Fatal(err)
	}
	defer func() {
		for _, m := range meters {
			m.Close()
		}
	}()
	sim.SetBeam(true)
	for role, q := range map[string]units.Quantity{"dosimeter": units.AirKermaRate, "photometer": units.Luminance} {
		r, err := meters[role].Read(ctx)
		if err != nil {
			t.Fatalf("%s: %v", role, err)
		}
		if r.Quantity != q || r.Unit != units.Canonical(q) || r.Raw == "" {
			t.Errorf("%s: %+v", role, r)
		}
	}
	if got := b.Found(meters, time.Date(2026, 6, 1, 0, 0, 0, 0, time.UTC)); got != "Dosimeter found, certificate valid until March 2027. Photometer found, certificate valid until May 2027." {
		t.Errorf("found: %q", got)
	}
	// The standby greeting in the bench's language, the month's name too
	// (the expected German and French written by hand).
	for lang, want := range map[string]string{
		"":   "Ready. Dosimeter found, certificate valid until March 2027. Photometer found, certificate valid until May 2027. Press the switch to start Acceptance and yearly check of the image intensifier.",
		"de": "Bereit. Dosimeter gefunden, Zertifikat gültig bis März 2027. Photometer gefunden, Zertifikat gültig bis Mai 2027. Taster drücken, um Abnahme- und Jahresprüfung des Bildverstärkers zu starten.",
		"fr": "Prêt. Dosimètre trouvé, certificat valable jusqu'en mars 2027. Photomètre trouvé, certificat valable jusqu'en mai 2027. Appuyez sur le bouton pour lancer Contrôle de réception et contrôle annuel de l'amplificateur de luminance.",
	} {
		if err := b.SetLanguage(lang); err != nil {
			t.Fatal(err)
		}
		if lang == "" {
			_ = b.SetLanguage("en")
		}
		if got := b.Greeting(meters, time.Date(2026, 6, 1, 0, 0, 0, 0, time.UTC), "Acceptance and yearly check of the image intensifier", false); got != want {
			t.Errorf("%s greeting\n got %q\nwant %q", lang, got, want)
		}
	}
}
