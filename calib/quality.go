package calib

import "strings"

// BeamQuality describes an X-ray beam quality: its name (for example "RQA5"),
// tube voltage in kV, added aluminium filtration in mm and first half-value
// layer in mm Al. Zero means "not stated".
type BeamQuality struct {
	Name        string  `json:"name,omitempty"`
	TubeVoltage float64 `json:"tube_voltage_kv,omitempty"`
	AddedAl     float64 `json:"added_al_mm,omitempty"`
	HVL         float64 `json:"hvl_mm_al,omitempty"`
}

// RQAQualities are the RQA radiation qualities of IEC 61267 (beams after
// added aluminium that simulate a patient), with the half-value layers of
// the second edition (IEC 61267:2005). The tube voltage is nominal: it is
// adjusted until the beam reaches the stated HVL. The first edition (1994)
// gave slightly different HVLs (RQA5 7.1 mm Al, for example); see
// [RQA1994HVL].
//
// This is kermalux's one table of beam qualities: the procedure checker
// accepts exactly these names and the corrections read certificate tables
// at these HVLs. It holds the four qualities whose values the project has
// from a source it names (/work/shared/reference.md, from IEC 61267);
// the standard's other RQA qualities (RQA2, 4, 6, 8, 10) are left out
// until their values are read in the standard itself: a half-value layer
// written from memory would place a certificate's coefficient at the
// wrong point of its table and give a calibrated reading that is wrong.
// A beam that is none of these is described by tube voltage in the
// procedure's setup instead.
var RQAQualities = []BeamQuality{
	{Name: "RQA3", TubeVoltage: 50, AddedAl: 10, HVL: 3.8},
	{Name: "RQA5", TubeVoltage: 70, AddedAl: 21, HVL: 6.8},
	{Name: "RQA7", TubeVoltage: 90, AddedAl: 30, HVL: 9.2},
	{Name: "RQA9", TubeVoltage: 120, AddedAl: 40, HVL: 11.6},
}

// RQA1994HVL are the half-value layers (mm Al) the first edition of
// IEC 61267 (1994) gave for the same qualities.
var RQA1994HVL = map[string]float64{"RQA3": 4.0, "RQA5": 7.1, "RQA7": 9.1, "RQA9": 11.5}

// RQA returns the IEC 61267 (2005) RQA quality of that name (case is
// ignored).
func RQA(name string) (BeamQuality, bool) {
	for _, q := range RQAQualities {
		if strings.EqualFold(q.Name, strings.TrimSpace(name)) {
			return q, true
		}
	}
	return BeamQuality{}, false
}

// filled returns q with its tube voltage and HVL taken from the RQA table
// when q names an RQA quality and leaves them unstated.
func (q BeamQuality) filled() BeamQuality {
	if r, ok := RQA(q.Name); ok {
		if q.TubeVoltage == 0 {
			q.TubeVoltage = r.TubeVoltage
		}
		if q.HVL == 0 {
			q.HVL = r.HVL
		}
		if q.AddedAl == 0 {
			q.AddedAl = r.AddedAl
		}
	}
	return q
}
