package live

import (
	"context"
	"fmt"
	"net/http/httptest"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"kermalux/drivers/clock"
	"kermalux/firmware-host/demo"
	"kermalux/procedures/catalog"
	"kermalux/procedures/engine"
	"kermalux/procedures/panel"
)

// chromium finds Debian's chromium. Without it the browser tests skip,
// unless KERMALUX_REQUIRE_CHROMIUM is set (CI sets it): then they fail.
func chromium(t *testing.T) string {
	t.Helper()
	for _, name := range []string{"chromium", "chromium-browser"} {
		if p, err := exec.LookPath(name); err == nil {
			return p
		}
	}
	if os.Getenv("KERMALUX_REQUIRE_CHROMIUM") != "" {
		t.Fatal("chromium not found and KERMALUX_REQUIRE_CHROMIUM is set (apt-get install -y --no-install-recommends chromium)")
	}
	t.Skip("chromium not installed (Debian: apt-get install chromium); set KERMALUX_REQUIRE_CHROMIUM=1 to make this a failure")
	return ""
}

// chromiumFlags are the launch flags for a headless chromium run as root
// on a machine with no display and no network to call home to.
func chromiumFlags(t *testing.T) []string {
	return []string{"--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
		"--disable-background-networking", "--disable-component-update", "--disable-sync",
		"--user-data-dir=" + t.TempDir()}
}

// liveSession runs a seeded acceptance session with the live view in the
// background. at(p) and said(m) may block the simulated operator, as a
// slow person would, while the test looks at the page.
type liveSession struct {
	url, code, token string
	done             chan error
	out              *demo.SeededOutcome
	ts               *httptest.Server
	srv              *Server
}

func startLive(t *testing.T, lang string, at func(panel.Prompt), said func(panel.Message)) *liveSession {
	hub := NewHub(0)
	ls := &liveSession{done: make(chan error, 1)}
	ready := make(chan struct{})
	msgs, err := catalog.Builtin(lang)
	if err != nil {
		t.Fatal(err)
	}
	o := demo.SeededOptions{Dir: t.TempDir(), OnAsk: at, OnSay: said, Language: lang,
		Wrap: func(j engine.Journal, p panel.Panel, clk clock.Clock) (engine.Journal, panel.Panel) {
			tj := NewJournal(j, hub, clk)
			srv, err := NewServer(hub, tj, Options{Log: quiet, Messages: msgs})
			if err != nil {
				t.Error(err)
			}
			ls.srv = srv
			ls.ts = httptest.NewServer(srv)
			ls.url, ls.code, ls.token = ls.ts.URL, srv.Code(), srv.Token()
			close(ready)
			return tj, NewPanel(p, hub, clk)
		}}
	// Seeded resolves the procedure from the bench: the server learns its
	// steps (what comes next) from the engine's configuration.
	o.Config = func(cfg *engine.Config, _ clock.Clock) { ls.srv.SetProcedure(cfg.Procedure) }
	go func() {
		out, err := demo.Seeded(context.Background(), o)
		ls.out = out
		ls.done <- err
	}()
	select {
	case <-ready:
	case err := <-ls.done:
		t.Fatalf("session ended before the live view started: %v", err)
	}
	t.Cleanup(func() { ls.ts.CloseClientConnections(); ls.ts.Close() })
	return ls
}

// The end-to-end test: a paired headless chromium watches a seeded
// acceptance session and the page shows, at three moments, what the
// board is doing: (1) in the pre-exposure checklist, (2) with the beam on
// just before "Release the beam", (3) at the end, with every result, also
// after the browser dropped and rejoined.
func TestBrowserShowsSessionAtThreeMoments(t *testing.T) {
	exe := chromium(t)
	moment1, release1 := make(chan panel.Prompt), make(chan struct{})
	moment2, release2 := make(chan panel.Message), make(chan struct{})
	var seen1, seen2 bool
	ls := startLive(t, "",
		func(p panel.Prompt) {
			if !seen1 && p.Action == panel.ActCheck && p.Setup["checklist"] == "pre-exposure" && p.Setup["item"] == "3" {
				seen1 = true
				moment1 <- p
				<-release1
			}
		},
		func(m panel.Message) {
			if !seen2 && m.Action == panel.ActBeamOff && m.Level == panel.Good {
				seen2 = true
				moment2 <- m
				<-release2
			}
		})

	opts := chromiumOptions(t, exe)
	opts = append(opts, chromedp.WindowSize(390, 844))
	actx, cancelA := chromedp.NewExecAllocator(context.Background(), opts...)
	defer cancelA()
	ctx, cancel := chromedp.NewContext(actx)
	defer cancel()
	ctx, cancelT := context.WithTimeout(ctx, 3*time.Minute)
	defer cancelT()

	// Pair as a person would: the page asks for the code the board spoke.
	if err := chromedp.Do(ctx,
		chromedp.Navigate(ls.url+"/"),
		chromedp.WaitVisible(`input[name=code]`),
	); err != nil {
		t.Fatalf("pairing page in the browser: %v", err)
	}
	if title, _ := chromedp.Run(ctx, chromedp.Title()); !strings.Contains(title, "pair") {
		t.Errorf("unpaired page title %q", title)
	}
	if err := chromedp.Do(ctx,
		chromedp.SendKeys(`input[name=code]`, ls.code),
		chromedp.Submit(`input[name=code]`),
		chromedp.WaitVisible(`#progress`),
	); err != nil {
		t.Fatalf("pairing in the browser: %v", err)
	}
	text := func(sel string) string {
		v, err := chromedp.Run(ctx, chromedp.Text(sel))
		if err != nil {
			t.Fatalf("text of %s: %v", sel, err)
		}
		return v
	}
	count := func(sel string) int {
		v, err := chromedp.Run(ctx, chromedp.Evaluate[int](fmt.Sprintf(`document.querySelectorAll(%q).length`, sel)))
		if err != nil {
			t.Fatalf("count of %s: %v", sel, err)
		}
		return v
	}
	poll := func(what, expr string) {
		if _, err := chromedp.Run(ctx, chromedp.Poll[bool](expr, chromedp.WithPollingTimeout(60*time.Second))); err != nil {
			state, _ := chromedp.Run(context.WithoutCancel(ctx), chromedp.Evaluate[string](`document.getElementById('link').textContent + ' | ' + document.getElementById('progress').textContent + ' | results ' + document.querySelectorAll('#results tbody tr').length`))
			t.Fatalf("%s: the page never showed it (%s): %v; page: %s", what, expr, err, state)
		}
	}

	// Moment 1: the third line of the pre-exposure checklist is asked.
	var p1 panel.Prompt
	select {
	case p1 = <-moment1:
	case err := <-ls.done:
		t.Fatalf("session ended early: %v", err)
	}
	poll("moment 1", `document.querySelectorAll('#acks li:not(.empty)').length >= 2 && document.getElementById('prompt').textContent.length > 0`)
	progress, prompt, next, beam := text(`#progress`), text(`#prompt`), text(`#next`), text(`#beam-state`)
	acks := count(`#acks li:not(.empty)`)
	t.Logf("moment 1: %q | %q | next %q | %q | %d acks", progress, prompt, next, beam, acks)
	if want := fmt.Sprintf("Step %d of %d", p1.Step, p1.Of); !strings.Contains(progress, want) {
		t.Errorf("moment 1: progress %q, want %q", progress, want)
	}
	if prompt != p1.Text || acks != 2 || !strings.Contains(strings.ToLower(beam), "off") || next == "" || next == "–" {
		t.Errorf("moment 1: prompt %q (board asks %q), %d acknowledgements (want 2), beam %q, next %q", prompt, p1.Text, acks, beam, next)
	}
	close(release1)

	// Moment 2: sampling is done and the board is about to say "Release the beam".
	select {
	case <-moment2:
	case err := <-ls.done:
		t.Fatalf("session ended early: %v", err)
	}
	poll("moment 2", `document.querySelectorAll('#meters .meter').length >= 2 && document.getElementById('beam-state').textContent === 'BEAM ON' && document.getElementById('beam-time').textContent !== '0:00'`)
	beam, beamTime := text(`#beam-state`), text(`#beam-time`)
	meters := count(`#meters .meter`)
	pts, err := chromedp.Run(ctx, chromedp.Evaluate[string](`document.querySelector('#meters .meter[data-meter=dosimeter] polyline').getAttribute('points')`))
	if err != nil {
		t.Fatalf("moment 2: trend line: %v", err)
	}
	points := len(strings.Fields(pts))
	dosimeter := text(`#meters .meter[data-meter=dosimeter] .val`)
	t.Logf("moment 2: %q %s, %d meters, dosimeter %q with %d trend points", beam, beamTime, meters, dosimeter, points)
	if beam != "BEAM ON" || meters < 2 || points < 10 || !strings.Contains(dosimeter, "µGy/s") {
		t.Errorf("moment 2: beam %q, %d meters, %d trend points, dosimeter %q", beam, meters, points, dosimeter)
	}
	close(release2)

	// Moment 3: the session is over.
	if err := <-ls.done; err != nil {
		t.Fatal(err)
	}
	want := ls.out.Summary.Results
	check3 := func(when string) {
		poll("moment 3 ("+when+")", fmt.Sprintf(`document.querySelectorAll('#results tbody tr').length === %d`, len(want)))
		rows := count(`#results tbody tr`)
		firstCF, done := text(`#results tbody tr[data-quantity=conversion_factor]`), text(`#prompt`)
		t.Logf("moment 3 (%s): %d results; first conversion factor row %q; %q", when, rows, firstCF, done)
		found := false
		for _, r := range want {
			if r.Quantity == "conversion_factor" {
				found = true
				if !strings.Contains(firstCF, r.Verdict) || !strings.Contains(firstCF, strings.ReplaceAll(r.DecidedBy, "_", " ")) {
					t.Errorf("moment 3 (%s): row %q lacks verdict %q or deciding limit %q", when, firstCF, r.Verdict, r.DecidedBy)
				}
				// As the report prints it: U to two significant digits, the
				// value to the same place (JCGM 100:2008 7.2.6).
				v, u := engine.RoundToUncertainty(r.Value, r.ExpUnc)
				if !strings.Contains(firstCF, v+" ± "+u+" "+r.Unit) {
					t.Errorf("moment 3 (%s): row %q does not show the computed %s ± %s %s", when, firstCF, v, u, r.Unit)
				}
				break
			}
		}
		if !found {
			t.Errorf("moment 3 (%s): no conversion factor among the results", when)
		}
		if done != "All steps done." {
			t.Errorf("moment 3 (%s): prompt %q", when, done)
		}
	}
	check3("live")
	// The browser drops and rejoins: a reload catches up from the journal.
	if err := chromedp.Do(ctx, chromedp.Reload()); err != nil {
		t.Fatal(err)
	}
	check3("after a reload")
}

// chromiumOptions are chromedp's allocator options for exe with the
// flags chromiumFlags gives ("--name=value" or "--name").
func chromiumOptions(t *testing.T, exe string) []chromedp.ExecAllocatorOption {
	opts := []chromedp.ExecAllocatorOption{chromedp.ExecPath(exe)}
	for _, f := range chromiumFlags(t) {
		name, val, ok := strings.Cut(strings.TrimPrefix(f, "--"), "=")
		if ok {
			opts = append(opts, chromedp.Flag(name, val))
		} else {
			opts = append(opts, chromedp.Flag(name, true))
		}
	}
	return opts
}

// browser starts a headless chromium with a window of w×h pixels.
func browser(t *testing.T, exe string, w, h int) (context.Context, context.CancelFunc) {
	opts := chromiumOptions(t, exe)
	opts = append(opts, chromedp.Flag("hide-scrollbars", true), chromedp.WindowSize(w, h))
	actx, cancelA := chromedp.NewExecAllocator(context.Background(), opts...)
	ctx, cancel := chromedp.NewContext(actx)
	ctx, cancelT := context.WithTimeout(ctx, 4*time.Minute)
	return ctx, func() { cancelT(); cancel(); cancelA() }
}

// TestScreenshots writes the page as pictures at a phone's width (390×844
// CSS pixels) and a desktop's (1280×900), whole pages, into
// $KERMALUX_LIVE_SCREENSHOTS: the pairing form; the third "Release the
// beam" of a seeded acceptance session (meters, trend lines, beam-on
// time, results so far); and the end of the session (every result). It
// is for looking at, so it runs only when asked; KERMALUX_LIVE_LANGUAGE
// (de, fr) runs the session and the page in that language.
func TestScreenshots(t *testing.T) {
	dir := os.Getenv("KERMALUX_LIVE_SCREENSHOTS")
	if dir == "" {
		t.Skip("set KERMALUX_LIVE_SCREENSHOTS=DIR to write the page's pictures")
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	exe := chromium(t)
	held, release := make(chan struct{}), make(chan struct{})
	releases := 0
	lang := os.Getenv("KERMALUX_LIVE_LANGUAGE")
	ls := startLive(t, lang, nil, func(m panel.Message) {
		if m.Action == panel.ActBeamOff && m.Level == panel.Good {
			releases++
			if releases == 3 {
				close(held)
				<-release
			}
		}
	})
	ctx, cancel := browser(t, exe, 390, 844)
	defer cancel()
	sizes := []struct{ w, h int64 }{{390, 844}, {1280, 900}}
	shoot := func(moment string) {
		for _, sz := range sizes {
			err := chromedp.Do(ctx, chromedp.EmulateViewport(sz.w, sz.h, chromedp.EmulateScale(1)),
				chromedp.Sleep(300*time.Millisecond)) // let the layout settle at the new width
			var png []byte
			if err == nil {
				png, err = chromedp.Run(ctx, chromedp.FullScreenshot(100))
			}
			if err != nil {
				t.Fatalf("screenshot %s at %d×%d: %v", moment, sz.w, sz.h, err)
			}
			name := moment
			if lang != "" {
				name = lang + "-" + moment
			}
			out := filepath.Join(dir, fmt.Sprintf("live-%s-%dx%d.png", name, sz.w, sz.h))
			if err := os.WriteFile(out, png, 0o644); err != nil {
				t.Fatal(err)
			}
			t.Logf("wrote %s (%d bytes)", out, len(png))
		}
	}
	poll := func(what, expr string) {
		if _, err := chromedp.Run(ctx, chromedp.Poll[bool](expr, chromedp.WithPollingTimeout(90*time.Second))); err != nil {
			t.Fatalf("%s: the page never showed it (%s): %v", what, expr, err)
		}
	}
	if err := chromedp.Do(ctx, chromedp.Navigate(ls.url+"/"), chromedp.WaitVisible(`input[name=code]`)); err != nil {
		t.Fatalf("pairing page: %v", err)
	}
	shoot("pairing")
	if err := chromedp.Do(ctx, chromedp.SendKeys(`input[name=code]`, ls.code), chromedp.Submit(`input[name=code]`), chromedp.WaitVisible(`#progress`)); err != nil {
		t.Fatalf("pairing: %v", err)
	}
	select {
	case <-held:
	case err := <-ls.done:
		t.Fatalf("session ended before the third release: %v", err)
	}
	poll("beam on", `document.querySelectorAll('#meters .meter').length >= 2 && document.getElementById('beam-state').classList.contains('on')`)
	shoot("beam")
	close(release)
	if err := <-ls.done; err != nil {
		t.Fatal(err)
	}
	poll("the end", fmt.Sprintf(`document.querySelectorAll('#results tbody tr').length === %d`, len(ls.out.Summary.Results)))
	shoot("end")
}
