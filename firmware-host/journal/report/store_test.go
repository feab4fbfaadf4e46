package report

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"kermalux/drivers/clock"
	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/store"
	"kermalux/firmware-host/journal/transfer/wire"
	"kermalux/procedures/entry"
)

// historyScale is the invented ageing of HV-2291: its conversion factors
// in year i of n are the sample's × (1 + 0.028·(n−1−i)), so the last year
// is the sample session itself.
func historyScale(i, n int) float64 { return 1 + 0.028*float64(n-1-i) }

// buildStore writes, through a real board journal, years yearly sessions of
// each of intensifiers intensifiers into a workstation store in dir. The
// first intensifier is HV-2291 with full sample sessions; the others are
// small sessions (session, three conversion factors, end).
func buildStore(tb testing.TB, dir string, intensifiers, years int) string {
	tb.Helper()
	return buildStoreAt(tb, dir, filepath.Join(dir, "workstation.store"), intensifiers, years)
}

// buildStoreAt is buildStore into the store at target (a file or a
// PostgreSQL URL).
func buildStoreAt(tb testing.TB, dir, target string, intensifiers, years int) string {
	tb.Helper()
	ctx := context.Background()
	first := time.Date(2026-years+1, 11, 18, 9, 2, 0, 0, time.UTC)
	clk := clock.NewManual(first)
	j, err := journal.Open(filepath.Join(dir, "board.journal"), journal.Options{KeyDir: filepath.Join(dir, "key"), Clock: clk, BootID: func() string { return "bench-boot" }})
	if err != nil {
		tb.Fatal(err)
	}
	defer j.Close()
	var ids []string
	base := map[string]float64{}
	for y := 0; y < years; y++ {
		day := time.Date(first.Year()+y, 11, 18, 9, 2, 0, 0, time.UTC)
		if d := day.Sub(clk.Now()); d > 0 {
			clk.Advance(d)
		}
		for k := 0; k < intensifiers; k++ {
			clk.Advance(time.Minute)
			var envs []entry.Envelope
			if k == 0 {
				scale := historyScale(y, years)
				if y == 0 {
					base = map[string]float64{"32cm": 152 * scale, "25cm": 93.1 * scale, "17cm": 42.6 * scale}
				}
				envs = sampleSessionAt(clk.Now(), fmt.Sprintf("hv2291-%d", day.Year()), scale, base)
			} else {
				envs = smallSession(k, clk.Now())
			}
			var s entry.Session
			if err := json.Unmarshal(envs[0].Payload, &s); err != nil {
				tb.Fatal(err)
			}
			s.BoardKey = ""
			id, err := j.Begin(ctx, s)
			if err != nil {
				tb.Fatal(err)
			}
			items := make([]journal.Item, 0, len(envs)-1)
			for _, e := range envs[1:] {
				items = append(items, journal.Item{Kind: e.Kind, Payload: e.Payload})
			}
			if _, err := j.AppendAll(ctx, id, items); err != nil {
				tb.Fatal(err)
			}
			ids = append(ids, id)
		}
	}
	path := target
	st, err := store.Open(path)
	if err != nil {
		tb.Fatal(err)
	}
	defer st.Close()
	if err := st.Enroll(ctx, j.PublicKey(), "bench board"); err != nil {
		tb.Fatal(err)
	}
	tx, err := st.Begin(ctx)
	if err != nil {
		tb.Fatal(err)
	}
	defer tx.Rollback()
	for _, id := range ids {
		recs, err := j.Records(ctx, id, 0, 0)
		if err != nil {
			tb.Fatal(err)
		}
		seg, err := wire.Seal(j, st.ID(), recs)
		if err != nil {
			tb.Fatal(err)
		}
		if _, err := tx.Apply(ctx, seg, store.ApplyOptions{}); err != nil {
			tb.Fatal(err)
		}
	}
	if err := tx.Commit(); err != nil {
		tb.Fatal(err)
	}
	return path
}

// smallSession is an invented short session of intensifier k.
func smallSession(k int, start time.Time) []entry.Envelope {
	id := fmt.Sprintf("bx%04d-%d", k, start.Year())
	w := &sampleWriter{wall: start, session: id}
	w.add(entry.KindSession, entry.Session{ID: id, Site: fmt.Sprintf("Invented Clinic %d", k%37), Room: fmt.Sprintf("Room %d", 1+k%4),
		IntensifierModel: "Meridel IX-23", IntensifierSerial: fmt.Sprintf("BX-%04d", k), Engineer: "Service engineer (demo)", Procedure: "yearly",
		Started: start}, 0)
	for i, m := range []string{"32cm", "25cm", "17cm"} {
		g := 150 / float64(i+1)
		w.add(entry.KindResult, entry.Result{Step: i + 1, FieldMode: m, Quantity: "conversion_factor", Value: g, Unit: "cd·m⁻²/(µGy·s⁻¹)",
			ExpUnc: 0.035 * g, K: 2, Verdict: "pass", Calibrated: true}, time.Minute)
	}
	w.add(entry.KindSessionEnd, entry.SessionEnd{Finished: w.wall.Add(time.Minute), Steps: 3, Outcome: "complete"}, time.Minute)
	return w.envs
}

func TestReportFromStore(t *testing.T) {
	ctx := context.Background()
	path := buildStore(t, t.TempDir(), 3, 7)
	st, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	rs, err := FromStore(ctx, st, Selection{Serial: "HV-2291", Latest: true}, 0.5)
	if err != nil {
		t.Fatal(err)
	}
	if len(rs) != 1 || len(rs[0].Trends) != 3 {
		t.Fatalf("reports %d, trends %d", len(rs), len(rs[0].Trends))
	}
	tr := FilterMode(rs[0].Trends, "32cm")[0]
	// The 32 cm conversion factor falls by 0.028 × 152 = 4.256 a year
	// (historyScale), baseline 152 × 1.168 = 177.536: the line reaches
	// 0.5 × 177.536 = 88.768 at (88.768 − 177.536)/(−4.256) = 20.857 years
	// after the first session (arithmetic on the line); the yearly dates
	// are calendar dates, so allow a day.
	if len(tr.Points) != 7 || tr.BaselineFrom != "recorded" {
		t.Fatalf("32cm trend: %d points, baseline %s", len(tr.Points), tr.BaselineFrom)
	}
	wantYears := (0.5*177.536 - 177.536) / -4.256
	want := tr.Origin.Add(time.Duration(wantYears * 365.25 * 24 * float64(time.Hour)))
	if len(tr.Projections) != 1 || !tr.Projections[0].HasCrossing || tr.Projections[0].From != "command line" {
		t.Fatalf("projections %+v, want the command line's 0.5 of baseline", tr.Projections)
	}
	pr := tr.Projections[0]
	if d := pr.Crossing.Sub(want); d < -36*time.Hour || d > 36*time.Hour {
		t.Errorf("crossing %s, want about %s", pr.Crossing.Format(time.DateOnly), want.Format(time.DateOnly))
	}
	html := renderHTML(t, rs[0])
	if !strings.Contains(html, "History of this intensifier") || !strings.Contains(html, "projected "+pr.Crossing.Format("January 2006")) {
		t.Errorf("report lacks the history or the projected date")
	}

	all, err := FromStore(ctx, st, Selection{Serial: "HV-2291"}, 0.5)
	if err != nil || len(all) != 7 {
		t.Fatalf("all sessions: %v, %d", err, len(all))
	}
	if n := len(all[0].Trends[0].Points); n != 1 {
		t.Errorf("the first session's report shows %d history points, want only itself", n)
	}
	if _, err := FromStore(ctx, st, Selection{Serial: "ZZ-0000"}, 0.5); err == nil || !strings.Contains(err.Error(), "ZZ-0000") {
		t.Errorf("unknown serial: %v", err)
	}

	out := t.TempDir()
	paths, err := rs[0].WriteFiles(out, Formats, fixedOpts)
	if err != nil || len(paths) != 4 {
		t.Fatalf("WriteFiles: %v %v", paths, err)
	}
	for _, p := range paths {
		if fi, err := os.Stat(p); err != nil || fi.Size() == 0 {
			t.Errorf("%s: %v", p, err)
		}
	}
	var text bytes.Buffer
	if err := WriteTrendText(&text, rs[0].Trends); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(text.String(), "Conversion factor of HV-2291, 32cm field") || !strings.Contains(text.String(), "projected September 2041") {
		t.Errorf("trend text:\n%s", text.String())
	}
	charts, err := WriteTrendCharts(filepath.Join(out, "trend.svg"), rs[0].Trends)
	if err != nil || len(charts) != 3 {
		t.Fatalf("trend charts: %v %v", charts, err)
	}
	if b, _ := os.ReadFile(charts[0]); !bytes.HasPrefix(b, []byte("<?xml")) || !bytes.Contains(b, []byte(`xmlns="http://www.w3.org/2000/svg"`)) {
		t.Errorf("%s is not an SVG file", charts[0])
	}
	if _, err := WriteTrendCharts(filepath.Join(out, "trend.gif"), rs[0].Trends); err == nil {
		t.Errorf("a .gif plot name is accepted")
	}
}

var (
	benchOnce  sync.Once
	benchStore string
	benchDir   string
)

// BenchmarkReportAndTrend renders, for an intensifier with 20 yearly
// sessions in a store of 1,000 intensifiers (20,000 sessions), its latest
// report in every format and its trend with chart (target: under 1 s
// each). "history" (the store query alone) is the baseline of the same
// run. Building the store takes a while the first time.
func BenchmarkReportAndTrend(b *testing.B) {
	benchOnce.Do(func() {
		root := ""
		if fi, err := os.Stat("/dev/shm"); err == nil && fi.IsDir() {
			root = "/dev/shm"
		}
		dir, err := os.MkdirTemp(root, "kermalux-report-bench-")
		if err != nil {
			b.Fatal(err)
		}
		benchDir = dir
		benchStore = buildStore(b, dir, 1000, 20)
	})
	ctx := context.Background()
	st, err := store.Open(benchStore)
	if err != nil {
		b.Fatal(err)
	}
	defer st.Close()
	b.Run("history", func(b *testing.B) {
		for i := 0; i < b.N; i++ {
			hs, err := st.History(ctx, "HV-2291")
			if err != nil || len(hs) != 20*8 {
				b.Fatalf("history: %d points, %v", len(hs), err)
			}
		}
	})
	// The search of every session's record 1 for one filed under another
	// serial, which the trend's and the report's verification run.
	b.Run("misfiled", func(b *testing.B) {
		for i := 0; i < b.N; i++ {
			if m, err := st.Misfiled(ctx, "HV-2291"); err != nil || len(m) != 0 {
				b.Fatalf("misfiled: %d, %v", len(m), err)
			}
		}
	})
	b.Run("trend", func(b *testing.B) {
		out := b.TempDir()
		for i := 0; i < b.N; i++ {
			ts, err := LoadTrends(ctx, StoreHistory{st}, "HV-2291", "conversion_factor", 0.5)
			if err != nil {
				b.Fatal(err)
			}
			if err := WriteTrendText(io.Discard, ts); err != nil {
				b.Fatal(err)
			}
			if _, err := WriteTrendCharts(filepath.Join(out, "trend.png"), FilterMode(ts, "32cm")); err != nil {
				b.Fatal(err)
			}
		}
	})
	b.Run("report", func(b *testing.B) {
		out := b.TempDir()
		for i := 0; i < b.N; i++ {
			rs, err := FromStore(ctx, st, Selection{Serial: "HV-2291", Latest: true}, 0.5)
			if err != nil {
				b.Fatal(err)
			}
			if _, err := rs[0].WriteFiles(out, Formats, fixedOpts); err != nil {
				b.Fatal(err)
			}
		}
	})
}

func TestMain(m *testing.M) {
	code := m.Run()
	if benchDir != "" {
		os.RemoveAll(benchDir)
	}
	os.Exit(code)
}
