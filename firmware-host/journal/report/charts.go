package report

import (
	"bytes"
	"fmt"
	"image/color"
	"math"
	"regexp"
	"strconv"
	"strings"
	"time"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/font"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
	"gonum.org/v1/plot/vg/vgsvg"
)

// Chart is a rendered chart: an SVG document for HTML and a PNG image for
// PDF, with a caption.
type Chart struct {
	Name    string // stable identifier, e.g. "map-32cm"
	Title   string
	Caption string
	SVG     string // the <svg> element, without the XML prolog
	PNG     []byte
	// Width and Height of the PNG in points, for laying it out in a PDF.
	Width, Height float64
}

var (
	inkColor    = color.RGBA{0x22, 0x2b, 0x36, 0xff}
	accentColor = color.RGBA{0x1f, 0x5f, 0x9e, 0xff}
	failColor   = color.RGBA{0xb0, 0x2a, 0x2a, 0xff}
	fitColor    = color.RGBA{0x6b, 0x7a, 0x8a, 0xff}
	gridColor   = color.RGBA{0xd5, 0xdb, 0xe1, 0xff}
)

// newPlot returns a plot in the report's sans-serif type.
func newPlot(title, xlabel, ylabel string) *plot.Plot {
	p := plot.New()
	p.Title.Text = title
	p.X.Label.Text = xlabel
	p.Y.Label.Text = ylabel
	sans := func(f *font.Font, size vg.Length) {
		f.Typeface = "Liberation"
		f.Variant = "Sans"
		f.Size = size
	}
	sans(&p.Title.TextStyle.Font, 12)
	sans(&p.X.Label.TextStyle.Font, 10)
	sans(&p.Y.Label.TextStyle.Font, 10)
	sans(&p.X.Tick.Label.Font, 9)
	sans(&p.Y.Tick.Label.Font, 9)
	sans(&p.Legend.TextStyle.Font, 9)
	p.Title.Padding = vg.Points(6)
	return p
}

func sansStyle(size vg.Length) font.Font {
	return font.Font{Typeface: "Liberation", Variant: "Sans", Size: size}
}

// pngScale is the size of a chart's PNG relative to its SVG.
const pngScale = 0.85

var svgSize = regexp.MustCompile(`^<svg width="([0-9.]+)pt" height="([0-9.]+)pt"`)

// chartSpec is a chart ready to draw.
type chartSpec struct {
	p                    *plot.Plot
	name, title, caption string
	w, h                 vg.Length
}

// render draws the chart as SVG and/or PNG.
func (s chartSpec) render(svg, png bool) (Chart, error) {
	p, name, w, h := s.p, s.name, s.w, s.h
	c := Chart{Name: name, Title: s.title, Caption: s.caption}
	if !svg {
		return c.withPNG(p, w, h)
	}
	sc := vgsvg.New(w, h)
	p.Draw(draw.New(sc))
	var sb bytes.Buffer
	if _, err := sc.WriteTo(&sb); err != nil {
		return c, fmt.Errorf("chart %s: svg: %w", name, err)
	}
	txt := sb.String()
	if i := strings.Index(txt, "<svg"); i >= 0 {
		txt = txt[i:]
	}
	txt = svgSize.ReplaceAllString(txt, `<svg class="chart" role="img" aria-label="`+htmlAttr(s.title)+`" width="${1}pt" height="${2}pt"`)
	txt = strings.ReplaceAll(txt, "font-family:Liberation Sans;", "font-family:'Liberation Sans',Arial,Helvetica,sans-serif;")
	c.SVG = txt
	if !png {
		return c, nil
	}
	return c.withPNG(p, w, h)
}

func (c Chart) withPNG(p *plot.Plot, w, h vg.Length) (Chart, error) {
	name := c.Name

	// The PNG (for PDF) is drawn on a smaller canvas so that its type,
	// kept at the same point size, reads well at print size.
	pw, ph := w*pngScale, h*pngScale
	c.Width, c.Height = pw.Points(), ph.Points()
	ic := vgimg.NewWith(vgimg.UseWH(pw, ph), vgimg.UseDPI(150), vgimg.UseBackgroundColor(color.White))
	p.Draw(draw.New(ic))
	var pb bytes.Buffer
	if _, err := (vgimg.PngCanvas{Canvas: ic}).WriteTo(&pb); err != nil {
		return c, fmt.Errorf("chart %s: png: %w", name, err)
	}
	c.PNG = pb.Bytes()
	return c, nil
}

func htmlAttr(s string) string {
	return strings.NewReplacer(`&`, "&amp;", `"`, "&quot;", `<`, "&lt;", `>`, "&gt;").Replace(s)
}

// fractionColor maps a fraction of centre luminance to a colour: dark
// blue at 1 (as bright as the centre), through teal and amber, to red at
// 0.6 and below.
func fractionColor(f float64) color.Color {
	stops := []struct {
		f float64
		c color.RGBA
	}{
		{0.6, color.RGBA{0xc0, 0x39, 0x2b, 0xff}},
		{0.75, color.RGBA{0xe6, 0x9b, 0x22, 0xff}},
		{0.9, color.RGBA{0x2a, 0x9d, 0x8f, 0xff}},
		{1.0, color.RGBA{0x1f, 0x4e, 0x8c, 0xff}},
	}
	if f <= stops[0].f {
		return stops[0].c
	}
	for i := 1; i < len(stops); i++ {
		if f <= stops[i].f {
			a, b := stops[i-1], stops[i]
			t := (f - a.f) / (b.f - a.f)
			mix := func(x, y uint8) uint8 { return uint8(math.Round(float64(x) + t*(float64(y)-float64(x)))) }
			return color.RGBA{mix(a.c.R, b.c.R), mix(a.c.G, b.c.G), mix(a.c.B, b.c.B), 0xff}
		}
	}
	return stops[len(stops)-1].c
}

// circle returns n+1 points on a circle of radius r around the origin.
func circle(r float64, n int) plotter.XYs {
	pts := make(plotter.XYs, n+1)
	for i := range pts {
		a := 2 * math.Pi * float64(i) / float64(n)
		pts[i].X, pts[i].Y = r*math.Cos(a), r*math.Sin(a)
	}
	return pts
}

// mapHalfWidth is the luminance map's half width in output radii (its
// half height is 1.25).
const mapHalfWidth = 1.5

// mapDiscRadius is the radius of a position's disc on the luminance map.
const mapDiscRadius = 13 // points

// mapLabels puts each label inside its disc, centred, in white: it can
// touch neither its own disc's edge nor a neighbour.
func mapLabels(pts plotter.XYs, labels []string) (*plotter.Labels, error) {
	lb, err := plotter.NewLabels(plotter.XYLabels{XYs: pts, Labels: labels})
	if err != nil {
		return nil, err
	}
	for i := range lb.TextStyle {
		lb.TextStyle[i].Font = sansStyle(7.5)
		lb.TextStyle[i].Color = color.White
		lb.TextStyle[i].XAlign = draw.XCenter
		lb.TextStyle[i].YAlign = draw.YCenter
	}
	return lb, nil
}

// mapSpec draws a luminance map, its compass words in the language tr
// translates into.
func mapSpec(m LuminanceMap, tr func(string) string) (chartSpec, error) {
	title := "Output face luminance"
	if m.FieldMode != "" {
		title += ", " + m.FieldMode + " field"
	}
	p := newPlot(title, "", "")
	p.HideAxes()
	// Room beside the face for the words left and right, which are longer
	// in German and French ("rechts", "gauche" were cut at the edge); the
	// chart is wider by as much, so the face stays round.
	p.X.Min, p.X.Max, p.Y.Min, p.Y.Max = -mapHalfWidth, mapHalfWidth, -1.25, 1.25

	edge, err := plotter.NewLine(circle(1, 120))
	if err != nil {
		return chartSpec{}, err
	}
	edge.Color, edge.Width = inkColor, vg.Points(1.2)
	p.Add(edge)
	for _, r := range []float64{0.5, 0.9} {
		ring, err := plotter.NewLine(circle(r, 120))
		if err != nil {
			return chartSpec{}, err
		}
		ring.Color, ring.Width, ring.Dashes = gridColor, vg.Points(0.8), []vg.Length{vg.Points(3), vg.Points(3)}
		p.Add(ring)
	}
	var pts plotter.XYs
	var labels []string
	var fracs []float64
	for _, q := range m.Points {
		if !q.Placed {
			continue
		}
		a := q.AngleDeg * math.Pi / 180
		pts = append(pts, plotter.XY{X: q.R * math.Cos(a), Y: q.R * math.Sin(a)})
		fracs = append(fracs, q.Fraction)
		if m.Centre > 0 {
			labels = append(labels, fmt.Sprintf("%.0f %%", 100*q.Fraction))
		} else {
			labels = append(labels, tr(Number(q.Mean)))
		}
	}
	if len(pts) == 0 {
		return chartSpec{}, fmt.Errorf("luminance map %s: no position could be placed on the face", m.FieldMode)
	}
	sc, err := plotter.NewScatter(pts)
	if err != nil {
		return chartSpec{}, err
	}
	sc.GlyphStyleFunc = func(i int) draw.GlyphStyle {
		c := color.Color(accentColor)
		if m.Centre > 0 {
			c = fractionColor(fracs[i])
		}
		return draw.GlyphStyle{Color: c, Radius: mapDiscRadius, Shape: draw.CircleGlyph{}}
	}
	p.Add(sc)
	lb, err := mapLabels(pts, labels)
	if err != nil {
		return chartSpec{}, err
	}
	p.Add(lb)
	// Direction words around the face so the map reads without a legend.
	dirs, err := plotter.NewLabels(plotter.XYLabels{
		XYs:    plotter.XYs{{X: 0, Y: 1.15}, {X: 0, Y: -1.15}, {X: -1.1, Y: 0}, {X: 1.1, Y: 0}},
		Labels: []string{tr("up"), tr("down"), tr("left"), tr("right")},
	})
	if err != nil {
		return chartSpec{}, err
	}
	for i := range dirs.TextStyle {
		dirs.TextStyle[i].Font = sansStyle(8)
		dirs.TextStyle[i].Color = fitColor
		dirs.TextStyle[i].XAlign = draw.XCenter
		dirs.TextStyle[i].YAlign = draw.YCenter
	}
	// Left and right grow away from the face, however long the word.
	dirs.TextStyle[2].XAlign, dirs.TextStyle[3].XAlign = draw.XRight, draw.XLeft
	p.Add(dirs)
	caption := "Each disc is a photometer position; the figure in it is the luminance there as a percentage of the centre. Dashed rings: 0.5 and 0.9 of the output radius."
	return chartSpec{p: p, name: "map-" + slug(m.FieldMode), title: title, caption: caption, w: 3.5 * mapHalfWidth / 1.25 * vg.Inch, h: 3.7 * vg.Inch}, nil
}

func profileSpec(m LuminanceMap) (chartSpec, error) {
	if len(m.Profile) < 2 {
		return chartSpec{}, fmt.Errorf("radial profile %s: fewer than two radii", m.FieldMode)
	}
	title := "Radial luminance profile"
	if m.FieldMode != "" {
		title += ", " + m.FieldMode + " field"
	}
	p := newPlot(title, "radius (fraction of output radius)", "luminance / centre")
	p.Add(plotter.NewGrid())
	pts := make(plotter.XYs, len(m.Profile))
	errs := make(plotter.YErrors, len(m.Profile))
	lo, hi := 1.0, 1.0
	for i, q := range m.Profile {
		pts[i] = plotter.XY{X: q.R, Y: q.Fraction}
		errs[i].Low, errs[i].High = q.Fraction-q.Min, q.Max-q.Fraction
		lo, hi = math.Min(lo, q.Min), math.Max(hi, q.Max)
	}
	line, err := plotter.NewLine(pts)
	if err != nil {
		return chartSpec{}, err
	}
	line.Color, line.Width = accentColor, vg.Points(1.5)
	sc, eb, err := pointsWithBars(pts, errs, 3)
	if err != nil {
		return chartSpec{}, err
	}
	p.Add(line, sc, eb)
	p.X.Min, p.X.Max = -0.05, 1.05
	p.Y.Min, p.Y.Max = math.Min(0.6, math.Floor(lo*20)/20), math.Max(1.05, hi+0.02)
	caption := "Mean over the directions at each radius; bars show the lowest and highest direction."
	return chartSpec{p: p, name: "profile-" + slug(m.FieldMode), title: title, caption: caption, w: 5 * vg.Inch, h: 3.2 * vg.Inch}, nil
}

// conversionSpec draws the conversion factor per field mode, its legend
// in the language tr translates into.
func conversionSpec(results []Result, tr func(string) string) (chartSpec, error) {
	var names []string
	var pts plotter.XYs
	var errs plotter.YErrors
	var fails []bool
	unit := ""
	var cf []Result
	for _, r := range results {
		if r.Quantity != "conversion_factor" || r.Unmeasured() {
			continue
		}
		cf = append(cf, r)
		names = append(names, orDash(r.FieldMode))
		pts = append(pts, plotter.XY{X: float64(len(pts)), Y: r.Value})
		errs = append(errs, struct{ Low, High float64 }{r.ExpUnc, r.ExpUnc})
		fails = append(fails, strings.EqualFold(r.Verdict, "fail"))
		unit = r.Unit
	}
	if len(pts) == 0 {
		return chartSpec{}, fmt.Errorf("conversion factor chart: no conversion factor results")
	}
	title := "Conversion factor per field mode"
	p := newPlot(title, "field mode", "conversion factor ("+unitText(unit)+")")
	p.Add(plotter.NewGrid())
	sc, err := plotter.NewScatter(pts)
	if err != nil {
		return chartSpec{}, err
	}
	sc.GlyphStyleFunc = func(i int) draw.GlyphStyle {
		c := color.Color(accentColor)
		if fails[i] {
			c = failColor
		}
		return draw.GlyphStyle{Color: c, Radius: vg.Points(4), Shape: draw.CircleGlyph{}}
	}
	eb, err := plotter.NewYErrorBars(struct {
		plotter.XYs
		plotter.YErrors
	}{pts, errs})
	if err != nil {
		return chartSpec{}, err
	}
	eb.Color, eb.Width, eb.CapWidth = inkColor, vg.Points(1), vg.Points(8)
	top := 0.0
	for i := range pts {
		top = math.Max(top, pts[i].Y+errs[i].High)
	}
	// Each field mode's limits as short lines across its column, and its
	// baseline as an open diamond; one legend entry per kind.
	legend := map[string]bool{}
	for i, r := range cf {
		x := float64(i)
		for _, l := range r.Limits {
			ln, err := plotter.NewLine(plotter.XYs{{X: x - 0.32, Y: l.Value}, {X: x + 0.32, Y: l.Value}})
			if err != nil {
				return chartSpec{}, err
			}
			ln.Color, ln.Width = limitColor(l.Kind), vg.Points(1.6)
			if l.Kind == "action level" {
				ln.Dashes = []vg.Length{vg.Points(4), vg.Points(2)}
			}
			p.Add(ln)
			if !legend[l.Kind] {
				legend[l.Kind] = true
				name := l.Kind + " limit"
				if l.Kind == "baseline" {
					name = fmt.Sprintf("baseline rule (%s of baseline)", Percent(l.Fraction))
				}
				p.Legend.Add(tr(name), ln)
			}
			top = math.Max(top, l.Value)
		}
		if r.Baseline > 0 {
			bm, err := plotter.NewScatter(plotter.XYs{{X: x + 0.2, Y: r.Baseline}})
			if err != nil {
				return chartSpec{}, err
			}
			bm.GlyphStyle = draw.GlyphStyle{Color: fitColor, Radius: vg.Points(3.5), Shape: draw.PyramidGlyph{}}
			p.Add(bm)
			if !legend["baseline value"] {
				legend["baseline value"] = true
				p.Legend.Add(tr("baseline (the earlier session)"), bm)
			}
			top = math.Max(top, r.Baseline)
		}
	}
	p.Add(eb, sc)
	p.Legend.Add(tr("result, bars: U"), sc)
	p.Legend.Top = true
	p.Legend.TextStyle.Font = sansStyle(8)
	p.NominalX(names...)
	// The legend gets the empty room right of the last column.
	p.X.Min, p.X.Max = -0.6, float64(len(pts))+1.3
	p.Y.Min = 0
	p.Y.Max = 1.1 * top
	p.Y.Tick.Marker = niceTicks{n: 8}
	caption := "Bars: expanded uncertainty U. Lines across each column: that field mode's limits (specification, action level, baseline rule); triangle: its baseline. Red: the result fails a limit."
	return chartSpec{p: p, name: "conversion-factor", title: title, caption: caption, w: 6 * vg.Inch, h: 3.4 * vg.Inch}, nil
}

// niceTicks labels about n round values (1, 2, 2.5 or 5 times a power of ten)
// with unlabelled ticks between, so a value axis reads without guessing.
type niceTicks struct{ n int }

func (t niceTicks) Ticks(min, max float64) []plot.Tick {
	if !(max > min) {
		return plot.DefaultTicks{}.Ticks(min, max)
	}
	raw := (max - min) / float64(t.n)
	p := math.Pow10(int(math.Floor(math.Log10(raw))))
	step := p
	for _, m := range []float64{1, 2, 2.5, 5, 10} {
		if m*p >= raw {
			step = m * p
			break
		}
	}
	var ts []plot.Tick
	dec := 0 // decimals that write the step exactly (0.25 needs two)
	for dec < 10 && math.Abs(step*math.Pow10(dec)-math.Round(step*math.Pow10(dec))) > 1e-9*step*math.Pow10(dec) {
		dec++
	}
	for v := math.Ceil(min/step) * step; v <= max+step*1e-9; v += step {
		ts = append(ts, plot.Tick{Value: v, Label: strconv.FormatFloat(v, 'f', dec, 64)})
		if h := v + step/2; h < max {
			ts = append(ts, plot.Tick{Value: h})
		}
	}
	return ts
}

// decimalYear converts a date to a fractional year for the trend axis.
func decimalYear(t time.Time) float64 {
	y := t.Year()
	start := time.Date(y, 1, 1, 0, 0, 0, 0, time.UTC)
	end := time.Date(y+1, 1, 1, 0, 0, 0, 0, time.UTC)
	return float64(y) + t.UTC().Sub(start).Hours()/end.Sub(start).Hours()
}

// yearTicks labels whole years.
type yearTicks struct{}

func (yearTicks) Ticks(min, max float64) []plot.Tick {
	step := 1
	for _, s := range []int{1, 2, 5, 10, 20, 50} {
		step = s
		if (max-min)/float64(s) <= 10 {
			break
		}
	}
	var ts []plot.Tick
	for y := int(math.Ceil(min)); float64(y) <= max; y++ {
		label := ""
		if y%step == 0 {
			label = fmt.Sprint(y)
		}
		ts = append(ts, plot.Tick{Value: float64(y), Label: label})
	}
	return ts
}

// trendSpec draws one intensifier's history of a quantity: the sessions
// with their U, the least-squares line and its band, and each configured
// limit with its projected date, the legend in the language tr translates
// into (nil: English).
func trendSpec(t Trend, tr func(string) string) (chartSpec, error) {
	if tr == nil {
		tr = func(s string) string { return s }
	}
	if len(t.Points) == 0 {
		return chartSpec{}, fmt.Errorf("trend chart: no sessions")
	}
	q := tr(quantityWords(t.Quantity))
	title := fmt.Sprintf(tr("%s of %s"), q, t.Serial)
	if t.FieldMode != "" {
		title = fmt.Sprintf(tr("%s, %s field"), title, t.FieldMode)
	}
	p := newPlot(title, "year", q+" ("+tr(unitText(t.Unit))+")")
	p.Add(plotter.NewGrid())
	p.X.Tick.Marker = yearTicks{}
	pts := make(plotter.XYs, len(t.Points))
	errs := make(plotter.YErrors, len(t.Points))
	ymin, ymax := math.Inf(1), math.Inf(-1)
	for i, q := range t.Points {
		pts[i] = plotter.XY{X: decimalYear(q.Date), Y: q.Value}
		errs[i].Low, errs[i].High = q.ExpUnc, q.ExpUnc
		ymin, ymax = math.Min(ymin, q.Value-q.ExpUnc), math.Max(ymax, q.Value+q.ExpUnc)
	}
	xmin, xmax := pts[0].X, pts[len(pts)-1].X
	if t.Fitted {
		last := t.Points[len(t.Points)-1].Date
		end := last
		for _, pr := range t.Projections {
			if pr.HasCrossing && pr.Crossing.After(end) && pr.Crossing.Sub(last) < 25*365*24*time.Hour {
				end = pr.Crossing
			}
		}
		x0, x1 := 0.0, years(end.Sub(t.Origin))
		var line, upper, lower plotter.XYs
		const steps = 40
		for i := 0; i <= steps; i++ {
			x := x0 + (x1-x0)*float64(i)/steps
			X := decimalYear(t.Origin) + x
			y := t.Line.At(x)
			line = append(line, plotter.XY{X: X, Y: y})
			if t.Line.DoF > 0 {
				h := t.Line.T * t.Line.SE(x)
				upper = append(upper, plotter.XY{X: X, Y: y + h})
				lower = append(lower, plotter.XY{X: X, Y: y - h})
				ymin, ymax = math.Min(ymin, y-h), math.Max(ymax, y+h)
			}
			ymin = math.Min(ymin, y)
		}
		fit, err := plotter.NewLine(line)
		if err != nil {
			return chartSpec{}, err
		}
		fit.Color, fit.Width, fit.Dashes = fitColor, vg.Points(1.2), []vg.Length{vg.Points(5), vg.Points(3)}
		p.Add(fit)
		p.Legend.Add(tr(fmt.Sprintf("least-squares line, %s %% of baseline a year", strings.Replace(fmt.Sprintf("%+.1f", 100*t.FracPerYear), "-", "−", 1))), fit)
		if len(upper) > 0 {
			for i, b := range []plotter.XYs{upper, lower} {
				bl, err := plotter.NewLine(b)
				if err != nil {
					return chartSpec{}, err
				}
				bl.Color, bl.Width, bl.Dashes = fitColor, vg.Points(0.7), []vg.Length{vg.Points(1.5), vg.Points(2)}
				p.Add(bl)
				if i == 0 {
					p.Legend.Add(tr(fmt.Sprintf("%.0f %% band of the line", 100*BandLevel)), bl)
				}
			}
		}
		xmax = math.Max(xmax, decimalYear(end))
	}
	for i, pr := range t.Projections {
		c := limitColor(pr.Kind)
		al, err := plotter.NewLine(plotter.XYs{{X: xmin - 0.5, Y: pr.Value}, {X: xmax + 0.5, Y: pr.Value}})
		if err != nil {
			return chartSpec{}, err
		}
		al.Color, al.Width = c, vg.Points(1.1)
		if i%2 == 1 {
			al.Dashes = []vg.Length{vg.Points(6), vg.Points(2)}
		}
		p.Add(al)
		// The legend names the limit and the projected month with its
		// band; labels inside the plot would squeeze the data area.
		name := pdfText(limitShort(pr.Kind, pr.Fraction, pr.Value, tr))
		if pr.HasCrossing {
			name += ": " + crossingShort(pr, tr)
		}
		p.Legend.Add(name, al)
		ymin, ymax = math.Min(ymin, pr.Value), math.Max(ymax, pr.Value)
		if !pr.HasCrossing || !pr.Crossing.After(t.Points[len(t.Points)-1].Date) || decimalYear(pr.Crossing) > xmax+0.01 {
			continue
		}
		mk, err := plotter.NewScatter(plotter.XYs{{X: decimalYear(pr.Crossing), Y: pr.Value}})
		if err != nil {
			return chartSpec{}, err
		}
		mk.GlyphStyle.Color, mk.GlyphStyle.Radius, mk.GlyphStyle.Shape = c, vg.Points(4), draw.CrossGlyph{}
		p.Add(mk)
	}
	sc, eb, err := pointsWithBars(pts, errs, 3.5)
	if err != nil {
		return chartSpec{}, err
	}
	p.Add(eb, sc)
	p.Legend.Add(tr("session (bars: U)"), sc)
	p.Legend.Top = true
	p.Legend.TextStyle.Font = sansStyle(8)
	p.Legend.XOffs, p.Legend.YOffs = -vg.Points(6), -vg.Points(4)
	p.Legend.Padding = vg.Points(1.5)
	p.X.Min, p.X.Max = math.Floor(xmin-0.3), math.Ceil(xmax+0.3)
	p.Y.Min = math.Max(0, ymin-0.1*(ymax-ymin+1))
	p.Y.Tick.Marker = niceTicks{n: 6}
	// Room above the points for the legend, one line per entry.
	p.Y.Max = ymax + (0.12+0.09*float64(len(t.Projections)+3))*(ymax-p.Y.Min)
	caption := fmt.Sprintf("Dashed: least-squares line through the measured sessions, with its %.0f %% confidence band (dotted), extended to the projected dates at the configured limits.", 100*BandLevel)
	return chartSpec{p: p, name: "trend-" + slug(t.FieldMode), title: title, caption: caption, w: 6.5 * vg.Inch, h: 4 * vg.Inch}, nil
}

// unitText writes a canonical unit for chart axes.
func unitText(u string) string {
	if u == "" || u == "1" {
		return "ratio"
	}
	return pdfText(u)
}

// slug makes a name safe for identifiers and file names.
func slug(s string) string {
	var b strings.Builder
	for _, r := range strings.ToLower(s) {
		switch {
		case r >= 'a' && r <= 'z', r >= '0' && r <= '9':
			b.WriteRune(r)
		case r == '-' || r == '_' || r == '.' || r == ' ':
			b.WriteByte('-')
		}
	}
	if b.Len() == 0 {
		return "all"
	}
	return b.String()
}

// Charts renders every chart the report has data for, in reading order,
// as SVG and PNG. A chart that cannot be drawn is skipped with its reason
// in the returned notes (the report still renders).
func (r *Report) Charts() (charts []Chart, notes []string) { return r.charts(nil, true, true) }

// charts draws the report's charts in w's language: titles, axis labels,
// legends and the luminance maps' words and figures translated, tick
// labels with the language's decimal separator.
func (r *Report) charts(w *words, svg, png bool) (charts []Chart, notes []string) {
	add := func(s chartSpec, err error) {
		if err == nil && w != nil {
			s.title, s.caption = w.text(s.title), w.text(s.caption)
			s.p.Title.Text = w.text(s.p.Title.Text)
			s.p.X.Label.Text = w.text(s.p.X.Label.Text)
			s.p.Y.Label.Text = w.text(s.p.Y.Label.Text)
			s.p.X.Tick.Marker = localTicks{s.p.X.Tick.Marker, w.c.Decimal}
			s.p.Y.Tick.Marker = localTicks{s.p.Y.Tick.Marker, w.c.Decimal}
		}
		if err == nil {
			var c Chart
			if c, err = s.render(svg, png); err == nil {
				charts = append(charts, c)
				return
			}
		}
		notes = append(notes, err.Error())
	}
	has := false
	for _, res := range r.Results {
		if res.Quantity == "conversion_factor" {
			has = true
		}
	}
	if has {
		add(conversionSpec(r.Results, w.text))
	}
	for _, m := range r.Maps {
		add(mapSpec(m, w.text))
		if len(m.Profile) >= 2 {
			add(profileSpec(m))
		}
	}
	for _, t := range r.Trends {
		add(trendSpec(t, w.text))
	}
	return charts, notes
}

// localTicks writes the tick labels of m with the decimal separator sep
// (DIN 1333, SI Brochure 5.4.4: the comma or the point, as the language
// writes it).
type localTicks struct {
	m   plot.Ticker
	sep string
}

func (t localTicks) Ticks(min, max float64) []plot.Tick {
	ts := t.m.Ticks(min, max)
	for i := range ts {
		ts[i].Label = decimals(ts[i].Label, t.sep)
	}
	return ts
}

// pointsWithBars draws values as dots of the given radius (points) with
// their expanded uncertainties as vertical bars.
func pointsWithBars(pts plotter.XYs, errs plotter.YErrors, radius float64) (*plotter.Scatter, *plotter.YErrorBars, error) {
	sc, err := plotter.NewScatter(pts)
	if err != nil {
		return nil, nil, err
	}
	sc.GlyphStyle = draw.GlyphStyle{Color: accentColor, Radius: vg.Points(radius), Shape: draw.CircleGlyph{}}
	eb, err := plotter.NewYErrorBars(struct {
		plotter.XYs
		plotter.YErrors
	}{pts, errs})
	if err != nil {
		return nil, nil, err
	}
	eb.Color = accentColor
	return sc, eb, nil
}

// limitColor tells the kinds of limit apart on charts.
func limitColor(kind string) color.Color {
	switch kind {
	case "specification":
		return failColor
	case "baseline":
		return color.RGBA{0x8a, 0x4b, 0x0f, 0xff}
	}
	return color.RGBA{0x7a, 0x2a, 0x8a, 0xff}
}

// limitShort names a limit for a chart legend: "specification 120",
// "baseline rule 80 % = 144.0", in the language tr translates into.
func limitShort(kind string, fraction, value float64, tr func(string) string) string {
	if kind == "baseline" {
		return tr(fmt.Sprintf("baseline rule %.0f %% = %s", 100*fraction, Number(value)))
	}
	return tr(kind) + " " + tr(Exact(value))
}

// crossingShort is a projected month with its band, for a legend:
// "Jul 2030 (Apr 2029 to Jun 2032)", the month names and the words in the
// language tr translates into.
func crossingShort(pr Projection, tr func(string) string) string {
	month := func(t time.Time) string { return tr(t.Format("Jan")) + " " + t.Format("2006") }
	s := month(pr.Crossing)
	switch {
	case pr.HasEarly && pr.HasLate:
		s += tr(fmt.Sprintf(" (%s to %s)", month(pr.Early), month(pr.Late)))
	case pr.HasEarly:
		s += tr(fmt.Sprintf(" (from %s)", month(pr.Early)))
	}
	return s
}
