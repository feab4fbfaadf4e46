package calib

import (
	"fmt"
	"sort"
	"testing"

	"kermalux/drivers/units"
)

// session computes everything a full acceptance session needs from the
// corrected samples: four field modes (conversion factor, input kerma rate,
// scaling), 13 uniformity positions, the contrast ratio, judgement and
// trend. It returns the number of results.
func session(lum, ker []Summary, uni []Summary, open, disk Summary, lc, kc []Component) int {
	n := 0
	limits := []Limit{{Kind: KindSpecification, Bound: AtLeast, Value: 100}, {Kind: KindBaseline, Bound: AtLeast, Value: 0.8}}
	modes := make([]Mode, len(lum))
	for i := range lum {
		l := Measured{Name: "centre luminance", Unit: "cd/m²", Samples: lum[i], TypeB: lc, Calibrated: true}
		k := Measured{Name: "input air kerma rate", Unit: "µGy/s", Samples: ker[i], TypeB: kc, Calibrated: true}
		g := ConversionFactor(l, k, 0)
		_ = Judge(g, 160, limits)
		_ = KermaRate(k, 0)
		modes[i] = Mode{Name: fmt.Sprint(i), FieldDiameter: 320 - 50*float64(i), Kerma: k}
		n += 2
	}
	rs, _ := ModeScaling(modes, 0)
	n += len(rs)
	sp := make([]Spot, len(uni))
	for i := range uni {
		sp[i] = Spot{Label: "p", Radius: []float64{0, 0.5, 0.9}[(i+2)/6%3], Luminance: Measured{Name: "p", Samples: uni[i], TypeB: lc, Calibrated: true}}
		if i == 0 {
			sp[i].Radius = 0
		}
	}
	u, _ := Uniformity(sp, 0)
	_ = Judge(u, 0, []Limit{{Kind: KindSpecification, Bound: AtMost, Value: 0.2}})
	c := ContrastRatio(Measured{Name: "open", Samples: open, TypeB: lc}, Measured{Name: "disk", Samples: disk, TypeB: lc}, 23, 230, 0)
	_ = Judge(c, 0, []Limit{{Kind: KindSpecification, Bound: AtLeast, Value: 15}})
	return n + 2
}

func BenchmarkFullSession(b *testing.B) {
	lc := []Component{{Source: "calibration coefficient", Rel: 0.01, Calibration: true}, ResolutionComponent(0.01)}
	kc := []Component{{Source: "calibration coefficient", Rel: 0.012, Calibration: true}, ResolutionComponent(0.001)}
	lum := []Summary{{12, 152, 1.2}, {12, 98, 0.9}, {12, 61, 0.7}, {12, 38, 0.5}}
	ker := []Summary{{12, 1.0, 0.01}, {12, 1.9, 0.02}, {12, 3.4, 0.03}, {12, 5.9, 0.05}}
	uni := make([]Summary, 13)
	for i := range uni {
		uni[i] = Summary{N: 6, Mean: 150 - 2*float64(i), SD: 1}
	}
	open, disk := Summary{N: 8, Mean: 150, SD: 1}, Summary{N: 8, Mean: 7, SD: 0.1}
	b.ReportAllocs()
	for i := 0; i < b.N; i++ {
		session(lum, ker, uni, open, disk, lc, kc)
	}
	// The target is well under a millisecond per session: report the share.
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/1e6, "ms_of_1ms_budget")
}

// BenchmarkCorrectReading is the per-reading cost of the corrections.
func BenchmarkCorrectReading(b *testing.B) {
	c := load(b, "veltrane-kr40-1187.yaml")
	s := Setup{Cert: c, Meter: own(c), Day: day("2026-12-02"), BeamQuality: BeamQuality{HVL: 7.3}, Air: Air{Temperature: 23, Pressure: 99},
		Geometry: Geometry{SourceToChamber: 950, SourceToInput: 1000}}
	b.ReportAllocs()
	for i := 0; i < b.N; i++ {
		_ = Correct(0.5, units.AirKermaRate, s)
	}
}

// BenchmarkReferenceSort is a fixed reference workload (sorting 1000
// numbers) run beside the others, so their figures can be read as a ratio
// that does not depend on how busy the machine is.
func BenchmarkReferenceSort(b *testing.B) {
	src := make([]float64, 1000)
	for i := range src {
		src[i] = float64((i * 7919) % 1000)
	}
	dst := make([]float64, len(src))
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		copy(dst, src)
		sort.Float64s(dst)
	}
}
