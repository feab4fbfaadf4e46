package report

import (
	"bytes"
	"fmt"
	"io"
	"strings"

	"codeberg.org/go-fonts/liberation/liberationmonoregular"
	"codeberg.org/go-fonts/liberation/liberationsansbold"
	"codeberg.org/go-fonts/liberation/liberationsansregular"
	"codeberg.org/go-pdf/fpdf"
)

// pdfDoc wraps fpdf with the report's few layout helpers.
type pdfDoc struct {
	f         *fpdf.Fpdf
	w, left   float64 // usable width and left margin, mm
	bottom    float64 // y beyond which a new page starts, mm
	simulated bool
	landscape bool   // pages added by the layout keep the current orientation
	words     *words // the report's language (nil: English)
}

// tx is s in the report's language, as the PDF's fonts can set it.
func (d *pdfDoc) tx(s string) string { return pdfText(d.words.text(s)) }

// newPage starts a page in the current orientation.
func (d *pdfDoc) newPage() {
	if d.landscape {
		d.f.AddPageFormat("L", fpdf.SizeType{Wd: 210, Ht: 297})
		return
	}
	d.f.AddPage()
}

const ptToMM = 25.4 / 72

// pdfReadingsMax is the most readings the PDF lists one by one (about 40
// pages); beyond it the PDF keeps the per-group summary only.
const pdfReadingsMax = 1500

type pdfCol struct {
	head  string
	width float64 // fraction of the usable width
	right bool
}

func (d *pdfDoc) font(style string, size float64) {
	d.f.SetFont("sans", style, size)
}

func (d *pdfDoc) ensure(h float64) {
	if d.f.GetY()+h > d.bottom {
		d.newPage()
	}
}

func (d *pdfDoc) heading(s string) {
	d.ensure(22)
	d.f.Ln(4)
	d.font("B", 13)
	d.f.SetTextColor(0x1d, 0x26, 0x30)
	d.f.CellFormat(d.w, 7, d.tx(s), "B", 1, "L", false, 0, "")
	d.f.Ln(2)
	d.f.Bookmark(d.words.text(s), 0, -1)
}

func (d *pdfDoc) subheading(s string) {
	d.ensure(28) // the heading, a table header and a first row together
	d.f.Ln(1.5)
	d.font("B", 10.5)
	d.f.CellFormat(d.w, 6, d.tx(s), "", 1, "L", false, 0, "")
}

func (d *pdfDoc) para(s string, size float64) {
	d.font("", size)
	d.f.MultiCell(d.w, size*0.5, d.tx(s), "", "L", false)
	d.f.Ln(1)
}

// info draws one of the signing blocks: a heading, its sentences, a
// table (two columns without a header: label and value) and notes.
func (d *pdfDoc) info(t infoTable) {
	d.heading(t.Title)
	for _, s := range t.Intro {
		d.para(s, 7.5)
	}
	if len(t.Rows) > 0 {
		// Widths follow the longest text of each column (within reason),
		// then fitColumns makes room for the longest word.
		cols := make([]pdfCol, len(t.Head))
		total := 0.0
		for i, h := range t.Head {
			n := len([]rune(h))
			for _, row := range t.Rows {
				if i < len(row) {
					n = max(n, len([]rune(row[i])))
				}
			}
			w := float64(min(max(n, 4), 60))
			cols[i] = pdfCol{head: h, width: w, right: i < len(t.Right) && t.Right[i]}
			total += w
		}
		for i := range cols {
			cols[i].width /= total
		}
		if len(cols) == 2 && cols[0].head == "" {
			cols[0].width, cols[1].width = 0.28, 0.72
			d.tableSized(cols, t.Rows, 8, false)
		} else {
			d.tableSized(cols, t.Rows, 7.5, true)
		}
	}
	for _, n := range t.Notes {
		d.f.SetTextColor(0xa8, 0x62, 0x00)
		d.para(n, 8)
		d.f.SetTextColor(0x1d, 0x26, 0x30)
	}
}

// table draws a table with wrapped cells, repeating the header on each
// new page.
func (d *pdfDoc) table(cols []pdfCol, rows [][]string) { d.tableSized(cols, rows, 7.5, true) }

// tableSized is table with a font size in points, and without a header
// row when head is false. Columns are widened to hold their longest word
// (a number, serial, certificate number or hash is never broken inside a
// cell), taking the room from columns that have some; when even that
// cannot fit, the type is made smaller.
func (d *pdfDoc) tableSized(cols []pdfCol, rows [][]string, size float64, head bool) {
	lh, pad := size*0.48, 1.1
	cols, size = d.fitColumns(cols, rows, size, pad, head)
	lh = size * 0.48
	header := func() {
		if !head {
			return
		}
		d.font("B", size)
		d.f.SetFillColor(0xf0, 0xf2, 0xf5)
		y := d.f.GetY()
		h := d.rowHeight(cols, nil, lh, pad, true)
		d.f.Rect(d.left, y, d.w, h, "F")
		d.drawRow(cols, nil, y, lh, pad, true)
		d.f.SetY(y + h)
		d.font("", size)
	}
	d.ensure(14)
	header()
	d.font("", size)
	for _, row := range rows {
		h := d.rowHeight(cols, row, lh, pad, false)
		if d.f.GetY()+h > d.bottom {
			d.newPage()
			header()
		}
		y := d.f.GetY()
		d.drawRow(cols, row, y, lh, pad, false)
		d.f.SetDrawColor(0xd5, 0xdb, 0xe1)
		d.f.Line(d.left, y+h, d.left+d.w, y+h)
		d.f.SetY(y + h)
	}
	d.f.Ln(2)
}

// fitColumns returns the columns with widths that hold every cell's
// longest word, and the font size that makes them fit the page.
func (d *pdfDoc) fitColumns(cols []pdfCol, rows [][]string, size, pad float64, head bool) ([]pdfCol, float64) {
	out := append([]pdfCol(nil), cols...)
	for try := 0; try < 10; try++ {
		mins := make([]float64, len(cols))
		for i := range cols {
			if head {
				d.font("B", size)
				mins[i] = d.longestWord(d.cellText(cols, nil, i, true))
			}
			d.font("", size)
			for _, row := range rows {
				mins[i] = max(mins[i], d.longestWord(d.cellText(cols, row, i, false)))
			}
			// MultiCell keeps its own cell margin on each side.
			mins[i] += 2*pad + 2*d.f.GetCellMargin() + 0.5
		}
		total := 0.0
		for _, m := range mins {
			total += m
		}
		if total > d.w && size > 5 {
			size = max(5, size*max(0.8, d.w/total))
			continue
		}
		widths := make([]float64, len(cols))
		need, slack := 0.0, 0.0
		for i, c := range cols {
			widths[i] = c.width * d.w
			if widths[i] < mins[i] {
				need += mins[i] - widths[i]
				widths[i] = mins[i]
			} else {
				slack += widths[i] - mins[i]
			}
		}
		for i := range widths {
			if need > 0 && slack > 0 && widths[i] > mins[i] {
				widths[i] -= need * (widths[i] - mins[i]) / slack
			}
			out[i].width = widths[i] / d.w
		}
		return out, size
	}
	return out, size
}

// longestWord is the width in mm of the widest space-separated word of s
// in the current font.
// pdfValue is ValueWithUnc with no-break spaces around ±, so a cell
// breaks, if it must, only between whole figures.
func pdfValue(v, u float64) string {
	return strings.ReplaceAll(ValueWithUnc(v, u), " ± ", "\u00a0±\u00a0")
}

func (d *pdfDoc) longestWord(s string) float64 {
	w := 0.0
	for _, word := range strings.Split(s, " ") { // fpdf breaks lines at ' ' only
		w = max(w, d.f.GetStringWidth(word))
	}
	return w
}

func (d *pdfDoc) cellText(cols []pdfCol, row []string, i int, head bool) string {
	if head {
		return d.tx(cols[i].head)
	}
	if i < len(row) {
		if cols[i].head == rawLineHead {
			return pdfText(row[i]) // what the meter sent, as it sent it
		}
		return d.tx(row[i])
	}
	return ""
}

// rawLineHead heads the column of what a meter sent, shown verbatim.
const rawLineHead = "Raw line"

// pdfText replaces characters the embedded fonts lack or fpdf cannot set:
// the superscript minus of units such as cd·m⁻²/(µGy·s⁻¹), combining marks.
func pdfText(s string) string {
	// fpdf does not place combining marks: the dot of K̇ (kerma rate)
	// would sit beside the K.
	s = strings.ReplaceAll(s, "K̇", "dK/dt")
	if !strings.ContainsRune(s, '⁻') {
		return s
	}
	s = strings.ReplaceAll(s, "cd·m⁻²/(µGy·s⁻¹)", "(cd/m²)/(µGy/s)")
	return strings.NewReplacer("⁻¹", "^-1", "⁻²", "^-2", "⁻", "-").Replace(s)
}

func (d *pdfDoc) rowHeight(cols []pdfCol, row []string, lh, pad float64, head bool) float64 {
	lines := 1
	for i, c := range cols {
		n := len(d.f.SplitText(d.cellText(cols, row, i, head), c.width*d.w-2*pad))
		if n > lines {
			lines = n
		}
	}
	return float64(lines)*lh + 2*pad
}

func (d *pdfDoc) drawRow(cols []pdfCol, row []string, y, lh, pad float64, head bool) {
	x := d.left
	for i, c := range cols {
		cw := c.width * d.w
		align := "L"
		if c.right {
			align = "R"
		}
		text := d.cellText(cols, row, i, head)
		src := "" // the cell as the report wrote it, before its translation
		if i < len(row) {
			src = row[i]
		}
		switch {
		case head:
		case src == "PASS" || src == "pass":
			d.f.SetTextColor(0x1e, 0x7a, 0x46)
		case src == "FAIL" || src == "fail":
			d.f.SetTextColor(0xb0, 0x2a, 0x2a)
		}
		d.f.SetXY(x+pad, y+pad)
		d.f.MultiCell(cw-2*pad, lh, text, "", align, false)
		d.f.SetTextColor(0x1d, 0x26, 0x30)
		x += cw
	}
}

// WritePDF writes the report as an A4 PDF with the same content as the
// HTML report; charts are embedded as PNG images.
func (r *Report) WritePDF(w io.Writer, opt Options) error {
	v := r.view(opt, chartsPNG)
	f := fpdf.New("P", "mm", "A4", "")
	f.AddUTF8FontFromBytes("sans", "", liberationsansregular.TTF)
	f.AddUTF8FontFromBytes("sans", "B", liberationsansbold.TTF)
	f.AddUTF8FontFromBytes("mono", "", liberationmonoregular.TTF)
	f.SetMargins(14, 14, 14)
	f.SetAutoPageBreak(true, 16)
	f.SetCreationDate(v.Generated)
	f.SetModificationDate(v.Generated)
	f.SetCatalogSort(true)
	title := fmt.Sprintf("Image intensifier check %s, %s %s, %s", r.Session.IntensifierSerial, r.Session.Site, r.Session.Room, Day(r.Session.Started))
	f.SetTitle(title, true)
	f.SetSubject("Acceptance report of session "+r.Session.ID, true)
	f.SetAuthor(r.Session.Engineer, true)
	f.SetCreator("kermalux "+v.Version, true)
	f.SetKeywords("image intensifier, conversion factor, "+r.Session.IntensifierSerial+", verdict "+v.Verdict, true)
	f.AliasNbPages("{nb}")
	pw, ph := f.GetPageSize()
	d := &pdfDoc{f: f, w: pw - 28, left: 14, bottom: ph - 18, simulated: r.Simulated, words: r.wordsFor(opt)}
	if stamp := r.UnverifiedText(); stamp != "" {
		// Every page, above its content: a forced report of records that
		// do not verify must not pass for a trusted one on any page.
		f.SetHeaderFunc(func() {
			d.font("B", 9)
			f.SetTextColor(0xb0, 0x2a, 0x2a)
			f.SetDrawColor(0xb0, 0x2a, 0x2a)
			f.SetLineWidth(0.6)
			f.MultiCell(d.w, 4.5, stamp, "1", "L", false)
			f.SetLineWidth(0.2)
			f.SetTextColor(0x1d, 0x26, 0x30)
			f.Ln(2)
		})
	}
	f.SetFooterFunc(func() {
		f.SetY(-12)
		d.font("", 7.5)
		f.SetTextColor(0x5b, 0x67, 0x75)
		left := fmt.Sprintf(d.words.text("%s · %s · session %s"), r.Session.IntensifierSerial, Day(r.Session.Started), r.Session.ID)
		if r.Simulated {
			left = d.words.text("SIMULATED, NOT A MEASUREMENT") + " · " + left
		}
		if len(r.Unverified) > 0 {
			left = d.words.text("NOT VERIFIED") + " · " + left
		}
		f.CellFormat(d.w*0.8, 5, d.tx(left), "T", 0, "L", false, 0, "")
		f.CellFormat(d.w*0.2, 5, d.tx(fmt.Sprintf("page %d of {nb}", f.PageNo())), "T", 0, "R", false, 0, "")
		f.SetTextColor(0x1d, 0x26, 0x30)
	})
	f.AddPage()
	f.SetTextColor(0x1d, 0x26, 0x30)

	d.font("B", 17)
	f.CellFormat(d.w, 9, d.tx("Image intensifier check: "+r.Session.IntensifierSerial), "", 1, "L", false, 0, "")
	d.font("", 9.5)
	f.SetTextColor(0x5b, 0x67, 0x75)
	f.CellFormat(d.w, 5, pdfText(fmt.Sprintf("%s · %s · %s · %s · ", r.Session.Site, r.Session.Room, r.Session.IntensifierModel, Day(r.Session.Started)))+d.tx(fmt.Sprintf("procedure “%s”", r.Session.Procedure)), "", 1, "L", false, 0, "")
	f.SetTextColor(0x1d, 0x26, 0x30)
	f.Ln(3)
	if r.Simulated {
		d.font("B", 10)
		f.SetTextColor(0xb0, 0x2a, 0x2a)
		f.SetDrawColor(0xb0, 0x2a, 0x2a)
		f.SetLineWidth(0.6)
		f.MultiCell(d.w, 5, d.tx("SIMULATED SESSION: the readings came from the bench simulator. These results are not measurements of any intensifier and must not be used for acceptance."), "1", "L", false)
		f.SetLineWidth(0.2)
		f.SetTextColor(0x1d, 0x26, 0x30)
		f.Ln(3)
	}

	// Summary box.
	y0 := f.GetY()
	f.SetXY(d.left+4, y0+4)
	d.font("B", 13)
	switch v.Verdict {
	case "pass":
		f.SetTextColor(0x1e, 0x7a, 0x46)
	case "fail":
		f.SetTextColor(0xb0, 0x2a, 0x2a)
	default:
		f.SetTextColor(0xa8, 0x62, 0x00)
	}
	f.MultiCell(62, 6, d.tx(verdictWords(v.Verdict)), "", "L", false)
	f.SetTextColor(0x5b, 0x67, 0x75)
	d.font("", 9)
	f.SetX(d.left + 4)
	f.CellFormat(60, 5, d.tx(fmt.Sprintf("%d pass · %d fail · %d for information", v.Pass, v.Fail, v.Info)), "", 2, "L", false, 0, "")
	f.SetX(d.left + 4)
	f.CellFormat(60, 5, d.tx("Beam on: "+BeamTime(r.BeamOn)+" in total"), "", 2, "L", false, 0, "")
	f.SetX(d.left + 4)
	d.font("", 8)
	f.MultiCell(60, 4, d.tx("Acceptance is the medical physicist’s decision, recorded in the signature box at the end."), "", "L", false)
	leftEnd := f.GetY()
	f.SetTextColor(0x1d, 0x26, 0x30)
	f.SetXY(d.left+70, y0+4)
	d.font("B", 10)
	if len(v.Review) > 0 {
		f.CellFormat(d.w-74, 6, d.tx(fmt.Sprintf("Needs review (%d)", len(v.Review))), "", 2, "L", false, 0, "")
		d.font("", 9)
		for _, s := range v.Review {
			f.SetX(d.left + 70)
			f.MultiCell(d.w-74, 4.5, "• "+d.tx(s), "", "L", false)
		}
	} else {
		f.CellFormat(d.w-74, 6, d.tx("Nothing needs review"), "", 2, "L", false, 0, "")
	}
	y1 := f.GetY()
	if leftEnd > y1 {
		y1 = leftEnd
	}
	y1 += 3
	f.SetDrawColor(0x1d, 0x26, 0x30)
	f.SetLineWidth(0.5)
	f.Rect(d.left, y0, d.w, y1-y0, "D")
	f.SetLineWidth(0.2)
	f.SetY(y1 + 3)

	finished := "not finished"
	if r.End != nil {
		finished = Stamp(r.End.Finished) + " (" + d.words.text(r.End.Outcome) + ")"
	}
	facts := [][2]string{
		{"Site", r.Session.Site}, {"Room", r.Session.Room}, {"Intensifier", r.Session.IntensifierModel + ", " + d.words.text("serial") + " " + r.Session.IntensifierSerial},
		{"Engineer", r.Session.Engineer}, {"Started", Stamp(r.Session.Started)}, {"Finished", finished},
		{"Procedure", fmt.Sprintf(d.words.text("%s · %d steps"), r.Session.Procedure, r.StepCount)}, {"Board", abbrevHex(r.Session.BoardKey)}, {"Software", "kermalux " + r.Session.SoftwareVersion},
	}
	cw := d.w / 3
	for i := 0; i < len(facts); i += 3 {
		y := f.GetY()
		bottom := y
		for j := 0; j < 3 && i+j < len(facts); j++ {
			f.SetXY(d.left+float64(j)*cw, y)
			d.font("", 7.5)
			f.SetTextColor(0x5b, 0x67, 0x75)
			f.CellFormat(cw-3, 3.8, d.tx(facts[i+j][0]), "T", 2, "L", false, 0, "")
			f.SetX(d.left + float64(j)*cw)
			d.font("", 9)
			f.SetTextColor(0x1d, 0x26, 0x30)
			f.MultiCell(cw-3, 4.4, facts[i+j][1], "", "L", false)
			if f.GetY() > bottom {
				bottom = f.GetY()
			}
		}
		f.SetY(bottom + 1.5)
	}

	for _, t := range v.SigningPre {
		d.info(t)
	}

	d.heading("Results")
	var rows [][]string
	for _, res := range r.Results {
		of := ""
		if res.BaselineFrac != 0 {
			of = Percent(res.BaselineFrac) + " of " + Number(res.Baseline)
		}
		notes := res.Flags
		if !res.Calibrated {
			notes = append([]string{"not calibrated"}, notes...)
		}
		rows = append(rows, []string{res.Name(), res.FieldMode, strings.ReplaceAll(res.Shown(), " ± ", "\u00a0±\u00a0"), unitForQuantity(res.Quantity, res.Unit), Kf(res.K), of, strings.ToUpper(d.words.text(res.Verdict)), res.DecidedBy, strings.Join(notes, "; ")})
	}
	d.table([]pdfCol{{"Result", .12, false}, {"Field", .05, false}, {"Value ± U", .12, true}, {"Unit", .1, false}, {"k", .05, true}, {"Of baseline", .1, true}, {"Verdict", .07, false}, {"Decided by", .17, false}, {"Notes", .22, false}}, rows)
	d.para("U is the expanded uncertainty with coverage factor k (JCGM 100:2008). A verdict compares the value itself with every limit; “Decided by” names the one that failed, or the closest. Every limit and its margin follow.", 7.5)
	for _, t := range v.SigningLimits {
		d.info(t)
	}

	if len(v.Charts) > 0 {
		d.pdfCharts(v.Charts)
	}
	for _, m := range r.Maps {
		d.subheading("Luminance positions, " + m.FieldMode + " field")
		var rows [][]string
		for _, p := range m.Points {
			rr, aa, fr := "?", "", ""
			if p.Placed {
				rr, aa = Exact(p.R)+" r", Exact(p.AngleDeg)+"°"
			}
			if p.Fraction != 0 {
				fr = Percent(p.Fraction)
			}
			rows = append(rows, []string{p.Label, rr, aa, fmt.Sprint(p.N), Number(p.Mean), fr})
		}
		d.table([]pdfCol{{"Position", .3, false}, {"Radius", .12, true}, {"Angle", .12, true}, {"Readings", .12, true}, {"Mean (" + m.Unit + ")", .17, true}, {"Of centre", .17, true}}, rows)
	}

	if len(r.Trends) > 0 {
		d.heading("History of this intensifier")
		for _, t := range r.Trends {
			d.subheading(quantityWords(t.Quantity) + ", " + orDash(t.FieldMode) + " field")
			var rows [][]string
			for _, p := range t.Points {
				day := Day(p.Date)
				if p.Simulated {
					day += " (simulated)"
				}
				rows = append(rows, []string{day, p.Site + " / " + p.Room, pdfValue(p.Value, p.ExpUnc), Percent(p.Fraction), strings.ToUpper(d.words.text(p.Verdict))})
			}
			d.table([]pdfCol{{"Date", .15, false}, {"Site / room", .4, false}, {"Value ± U", .17, true}, {"Of baseline", .15, true}, {"Verdict", .13, false}}, rows)
			d.para(trendSentence(t), 8.5)
		}
	}

	d.heading("Calibration certificates")
	if len(r.Certificates) == 0 {
		d.para("No certificate was recorded: no reading in this session is calibrated.", 9)
	} else {
		var rows [][]string
		for _, c := range r.Certificates {
			rows = append(rows, []string{c.ID, c.Meter, c.Model + ", " + c.Serial, c.Laboratory, Day(c.Calibrated), Day(c.Due), certStanding(c), abbrevHex(c.SHA256)})
		}
		d.table([]pdfCol{{"Certificate", .12, false}, {"Meter", .1, false}, {"Model, serial", .15, false}, {"Laboratory", .16, false}, {"Calibrated", .1, false}, {"Due", .1, false}, {"Standing on the day", .14, false}, {"File SHA-256", .13, false}}, rows)
	}

	d.heading("Corrections applied")
	if len(r.Corrections) == 0 {
		d.para("No corrections were recorded.", 9)
	} else {
		var rows [][]string
		for _, c := range r.Corrections {
			fac := Factor(c.MinFactor)
			if c.MinFactor != c.MaxFactor {
				fac += " to " + Factor(c.MaxFactor)
			}
			off := Number(c.MinOffset)
			if c.MinOffset != c.MaxOffset {
				off += " to " + Number(c.MaxOffset)
			}
			rows = append(rows, []string{correctionWords(c.Name) + " (" + c.Name + ")", fmt.Sprint(c.Count), fac, off, strings.Join(c.Notes, "; ")})
		}
		d.table([]pdfCol{{"Correction", .25, false}, {"Readings", .09, true}, {"Factor", .17, true}, {"Offset", .09, true}, {"Notes", .40, false}}, rows)
	}
	if len(r.Values) > 0 {
		d.subheading("Values entered")
		var rows [][]string
		for _, val := range r.Values {
			rows = append(rows, []string{Clock(val.Wall), fmt.Sprint(val.Step), val.Name, Exact(val.Value.Value) + " " + val.Unit, val.Source})
		}
		d.table([]pdfCol{{"Time", .15, false}, {"Step", .1, true}, {"Quantity", .3, false}, {"Value", .2, true}, {"Source", .25, false}}, rows)
	}

	for _, t := range v.SigningPost {
		d.info(t)
	}

	d.heading("Uncertainty budgets")
	for _, bv := range v.Budgets {
		res := bv.Result
		d.subheading(fmt.Sprintf("%s%s%s %s %s (k = %s)", d.words.text(res.Name()), prefixed(", ", res.FieldMode), d.words.colon(), res.Shown(), unitShown(res.Unit), Kf(res.K)))
		var rows [][]string
		for _, b := range res.Budget {
			dof := "∞"
			if b.DoF != 0 {
				dof = DoF(b.DoF)
			}
			rows = append(rows, []string{b.Source, b.Type, Number(b.Value) + " " + unitShown(b.Unit), Number(b.StdUnc), Percent(b.RelStdUnc), Number(b.Sensitivity), Percent(b.Contribution), dof})
		}
		rel := ""
		if res.Value != 0 {
			rel = Percent(res.StdUnc / abs(res.Value))
		}
		rows = append(rows, []string{"Combined standard uncertainty of the result", "", "", Number(res.StdUnc), rel, "", "U = " + Number(res.ExpUnc), "k = " + Kf(res.K)})
		d.table([]pdfCol{{"Source", .32, false}, {"Type", .06, false}, {"Estimate", .14, true}, {"Std. unc.", .12, true}, {"Relative", .09, true}, {"Sens.", .07, true}, {"Contrib.", .1, true}, {"DoF", .1, true}}, rows)
		if len(bv.Gaps) > 0 {
			var gaps [][]string
			for _, g := range bv.Gaps {
				gaps = append(gaps, []string{g.Source, g.Why})
			}
			d.tableSized([]pdfCol{{"Also weighed, not in the rows above", .32, false}, {"Why", .68, false}}, gaps, 7, true)
		}
	}

	d.heading("Safety acknowledgements")
	if len(v.Safety) == 0 {
		d.para("No safety checklist acknowledgement is in the journal.", 9)
	} else {
		var rows [][]string
		for _, a := range v.Safety {
			rows = append(rows, []string{Stamp(a.At), fmt.Sprint(a.Step), a.Text, a.Answer})
		}
		d.table([]pdfCol{{"Time", .25, false}, {"Step", .07, true}, {"Prompt", .53, false}, {"Answer", .15, false}}, rows)
	}
	if len(v.Others) > 0 {
		d.subheading("Other acknowledgements")
		var rows [][]string
		for _, a := range v.Others {
			rows = append(rows, []string{Clock(a.At), fmt.Sprint(a.Step), a.Text, a.Answer})
		}
		d.table([]pdfCol{{"Time", .25, false}, {"Step", .07, true}, {"Prompt", .53, false}, {"Answer", .15, false}}, rows)
	}

	d.heading("Beam-on time and events")
	summary := "Cumulative beam-on time: " + BeamTime(r.BeamOn)
	if len(v.Exposures) > 0 {
		summary += fmt.Sprintf(" in %d exposures", len(v.Exposures))
	}
	d.para(summary+".", 9)
	if len(v.Events) > 0 {
		d.subheading("Events")
		var rows [][]string
		for _, e := range v.Events {
			bt := ""
			if e.Beam {
				bt = BeamTime(e.BeamOn)
			}
			rows = append(rows, []string{Clock(e.Wall), fmt.Sprint(e.Step), e.What, e.Detail, bt})
		}
		d.table([]pdfCol{{"Time", .12, false}, {"Step", .07, true}, {"Event", .28, false}, {"Detail", .38, false}, {"Beam on so far", .15, true}}, rows)
	}
	if len(v.Exposures) > 0 {
		d.subheading("Exposures")
		var rows [][]string
		for i, x := range v.Exposures {
			off := Clock(x.Off)
			if x.Open {
				off = "not recorded"
			}
			rows = append(rows, []string{fmt.Sprint(i + 1), fmt.Sprint(x.Step), Clock(x.On), off, BeamTime(x.Duration), BeamTime(x.Cumulative)})
		}
		d.table([]pdfCol{{"#", .08, true}, {"Step", .08, true}, {"Beam on", .2, false}, {"Beam off", .2, false}, {"This exposure", .22, true}, {"Cumulative", .22, true}}, rows)
	}

	d.heading("Cautions")
	for _, c := range cautions(r.Simulated) {
		d.para("• "+d.words.text(c), 9) // the caution is catalogued without its bullet
	}

	d.heading("Review and signature")
	d.ensure(70)
	d.para("Comments of the medical physicist:", 9)
	y := f.GetY()
	f.SetDrawColor(0x9a, 0xa4, 0xae)
	f.Rect(d.left, y, d.w, 38, "D")
	f.SetY(y + 42)
	// Tick boxes drawn as squares: the embedded fonts have no U+2610.
	d.font("", 9.5)
	x, yb := d.left, f.GetY()
	for _, lab := range []string{"Accepted", "Accepted with conditions", "Not accepted"} {
		f.SetDrawColor(0x1d, 0x26, 0x30)
		f.Rect(x, yb+0.6, 3.4, 3.4, "D")
		f.SetXY(x+5, yb)
		lab = d.tx(lab)
		f.CellFormat(f.GetStringWidth(lab)+2, 4.6, lab, "", 0, "L", false, 0, "")
		x += 5 + f.GetStringWidth(lab) + 12
	}
	f.SetY(yb + 6)
	f.Ln(10)
	y = f.GetY()
	f.SetDrawColor(0x1d, 0x26, 0x30)
	for i, lab := range []string{"Name and qualification", "Signature", "Date"} {
		x := d.left + float64(i)*d.w/3
		f.Line(x, y, x+d.w/3-6, y)
		f.SetXY(x, y+1)
		d.font("", 7.5)
		f.CellFormat(d.w/3-6, 4, d.tx(lab), "", 0, "L", false, 0, "")
	}
	f.SetY(y + 8)

	d.landscape = true
	d.newPage()
	pw, ph = f.GetPageSize()
	d.w, d.bottom = pw-28, ph-18
	d.heading("Appendix: the readings")
	d.para(fmt.Sprintf("%d readings in %d groups (one meter, one step, one position). Mean, lowest and highest are of the corrected values that entered a result.", len(r.Readings), len(v.Groups)), 8)
	rows = rows[:0]
	for _, g := range v.Groups {
		mean, rng := "", ""
		if g.Used > 0 {
			mean, rng = Number(g.Mean), Number(g.Min)+" – "+Number(g.Max)
		}
		var notes []string
		if g.NotOK > 0 {
			notes = append(notes, fmt.Sprintf("%d not ok", g.NotOK))
		}
		if g.Uncalibrated > 0 {
			notes = append(notes, fmt.Sprintf("%d uncalibrated", g.Uncalibrated))
		}
		rows = append(rows, []string{fmt.Sprint(g.Step), g.StepID, g.FieldMode, g.Position, g.Meter, fmt.Sprint(g.N), fmt.Sprint(g.Used), mean, rng, g.Unit, strings.Join(g.Corrections, ", "), strings.Join(notes, "; ")})
	}
	d.tableSized([]pdfCol{{"Step", .04, true}, {"Step id", .12, false}, {"Field", .05, false}, {"Position", .07, false}, {"Meter", .08, false}, {"Readings", .06, true}, {"Used", .05, true}, {"Mean", .07, true}, {"Lowest – highest", .12, true}, {"Unit", .06, false}, {"Corrections", .18, false}, {"Notes", .1, false}}, rows, 7, true)
	if len(r.Readings) <= pdfReadingsMax {
		d.subheading("Every reading")
		rows = rows[:0]
		for _, rd := range r.Readings {
			st := rd.Status
			if !rd.Used {
				st += ", not used"
			}
			if !rd.Calibrated {
				st += ", uncalibrated"
			}
			if len(rd.Flags) > 0 {
				st += ", " + strings.Join(rd.Flags, ", ")
			}
			rows = append(rows, []string{fmt.Sprint(rd.Seq), Clock(rd.Wall), rd.StepID, rd.FieldMode, rd.Position, rd.Meter, rd.Raw, correctionsText(rd.Corrections), Number(rd.Value) + " " + rd.Unit, st})
		}
		d.tableSized([]pdfCol{{"Seq", .04, true}, {"Time", .06, false}, {"Step", .11, false}, {"Field", .05, false}, {"Position", .07, false}, {"Meter", .07, false}, {rawLineHead, .14, false}, {"Corrections", .24, false}, {"Corrected", .09, true}, {"Status", .13, false}}, rows, 6.5, true)
	} else {
		d.para(fmt.Sprintf("The %d readings one by one (raw line, each correction, corrected value) are in the readings CSV and the HTML report: more than %d would not make a readable PDF.", len(r.Readings), pdfReadingsMax), 8)
	}
	d.para(fmt.Sprintf("Session %s · procedure SHA-256 %s · bench file SHA-256 %s · rendered %s by kermalux %s.", r.Session.ID, r.Session.ProcedureHash, r.Session.BenchHash, Stamp(v.Generated), v.Version), 7)

	if err := f.Error(); err != nil {
		return fmt.Errorf("render PDF report of session %s: %w", r.Session.ID, err)
	}
	if err := f.Output(w); err != nil {
		return fmt.Errorf("write PDF report of session %s: %w", r.Session.ID, err)
	}
	return nil
}

func abs(x float64) float64 {
	if x < 0 {
		return -x
	}
	return x
}

func prefixed(p, s string) string {
	if s == "" {
		return ""
	}
	return p + s
}

func certStanding(c Certificate) string {
	if c.Status == "expired" {
		return fmt.Sprintf("expired (%d days overdue)", -c.DaysToDue)
	}
	return fmt.Sprintf("%s (%d days left)", c.Status, c.DaysToDue)
}

// trendSentence says a trend's fit and projections in one paragraph.
func trendSentence(t Trend) string {
	s := fmt.Sprintf("Baseline %s %s (%s).", Number(t.Baseline), unitWords(t.Unit), t.BaselineFrom)
	if t.Simulated {
		s += " Every session here is simulated: the line is no measurement."
	} else if t.FitPoints < len(t.Points) {
		s += fmt.Sprintf(" The line is fitted through the %d measured sessions; simulated sessions are shown, not fitted.", t.FitPoints)
	}
	if t.Fitted {
		s += fmt.Sprintf(" Rate of change %s %s a year", Signed(t.Slope), unitWords(t.Unit))
		if t.Line.DoF > 0 {
			s += fmt.Sprintf(" (standard uncertainty %s, %d degrees of freedom)", Number(t.Line.SlopeSE()), t.Line.DoF)
		}
		if t.Baseline != 0 {
			s += ", " + strings.Replace(fmt.Sprintf("%+.1f", 100*t.FracPerYear), "-", "−", 1) + " % of baseline a year"
		}
		s += "."
	}
	for _, pr := range t.Projections {
		s += " " + capital(limitWords(pr.Kind, pr.Bound, pr.Fraction, pr.Value, t.Unit))
		if pr.From == "command line" {
			s += " (given on the command line)"
		}
		if pr.HasCrossing {
			s += ": projected " + crossingWords(pr)
		}
		if pr.Note != "" {
			if pr.HasCrossing {
				s += "; " + pr.Note
			} else {
				s += ": " + pr.Note
			}
		}
		s += "."
	}
	if t.Note != "" {
		s += " " + capital(t.Note) + "."
	}
	return s
}

// crossingWords gives a projected date to the month with its band:
// "March 2031 (95 % band June 2029 to January 2034)".
func crossingWords(pr Projection) string {
	const month = "January 2006"
	s := pr.Crossing.Format(month)
	switch {
	case pr.HasEarly && pr.HasLate:
		s += fmt.Sprintf(" (%.0f %% band %s to %s)", 100*BandLevel, pr.Early.Format(month), pr.Late.Format(month))
	case pr.HasEarly:
		s += fmt.Sprintf(" (%.0f %% band from %s, no latest date)", 100*BandLevel, pr.Early.Format(month))
	case pr.HasLate:
		s += fmt.Sprintf(" (%.0f %% band up to %s)", 100*BandLevel, pr.Late.Format(month))
	}
	return s
}

// limitWords says a limit with its absolute value: "specification
// minimum 120 cd·m⁻²/(µGy·s⁻¹)", "baseline rule minimum 80 % of baseline
// = 134.4 cd·m⁻²/(µGy·s⁻¹)".
func limitWords(kind, bound string, fraction, value float64, unit string) string {
	side := "minimum"
	if bound == "at_most" {
		side = "maximum"
	}
	u := unitWords(unit)
	if u != "" {
		u = " " + u
	}
	if kind == "baseline" {
		return fmt.Sprintf("baseline rule %s %s of baseline = %s%s", side, Percent(fraction), Number(value), u)
	}
	return fmt.Sprintf("%s %s %s%s", kind, side, Exact(value), u)
}

func capital(s string) string {
	if s == "" {
		return s
	}
	return strings.ToUpper(s[:1]) + s[1:]
}

// cautions are the radiation-safety and scope cautions every report
// carries.
func cautions(simulated bool) []string {
	c := []string{
		"X-rays are dangerous. Everyone present during exposures must wear protection and stay shielded; follow the radiation protection rules of your site.",
		"This report does not replace the judgement of a qualified medical physicist or radiation safety officer, nor the regulations that apply where the equipment is used. Acceptance is their decision.",
		"Limits, baselines and action levels here are the ones configured for this session; local requirements take precedence.",
		"A result is only as good as the meters’ calibration: check the certificates above.",
	}
	if simulated {
		c = append(c, "This session came from the bench simulator: its results are not measurements.")
	}
	return c
}

// pdfCharts lays the charts out two to a row (a wide chart takes a row of
// its own), keeping each chart with its caption on one page.
func (d *pdfDoc) pdfCharts(charts []Chart) {
	f := d.f
	colW := (d.w - 6) / 2
	type placed struct {
		c    Chart
		w, h float64
		full bool
	}
	var items []placed
	for _, c := range charts {
		wmm, hmm := c.Width*ptToMM, c.Height*ptToMM
		full := wmm > colW*1.3
		limit := colW
		if full {
			limit = d.w
		}
		if wmm > limit {
			wmm, hmm = limit, hmm*limit/wmm
		}
		items = append(items, placed{c, wmm, hmm, full})
	}
	first := true
	for i := 0; i < len(items); {
		row := items[i : i+1]
		if !items[i].full && i+1 < len(items) && !items[i+1].full {
			row = items[i : i+2]
		}
		h := 0.0
		for _, it := range row {
			if it.h > h {
				h = it.h
			}
		}
		need := h + 12
		if first {
			need += 16
		}
		d.ensure(need)
		if first {
			d.heading("Charts")
			first = false
		}
		y := f.GetY()
		capY := y + h + 1
		for j, it := range row {
			x := d.left + float64(j)*(colW+6)
			name := fmt.Sprintf("chart-%d-%s", i+j, it.c.Name)
			opts := fpdf.ImageOptions{ImageType: "PNG"}
			f.RegisterImageOptionsReader(name, opts, bytes.NewReader(it.c.PNG))
			f.ImageOptions(name, x, y, it.w, it.h, false, opts, 0, "")
			f.SetXY(x, capY)
			d.font("", 7)
			f.SetTextColor(0x5b, 0x67, 0x75)
			f.MultiCell(it.w, 3.3, d.tx(it.c.Caption), "", "L", false)
			f.SetTextColor(0x1d, 0x26, 0x30)
		}
		f.SetY(capY + 10)
		i += len(row)
	}
}
