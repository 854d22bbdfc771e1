package calib

import (
	"encoding/json"
	"errors"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"testing"
)

// TestAverageRFByHand works the external-standard model by hand.
//
//	C_x: 1, 2, 4, 5, 10; A_x: 10, 22, 36, 50, 110
//	RF_i = A_x/C_x = 10, 11, 9, 10, 11;  RF̄ = 51/5 = 10.2
//	deviations −0.2, 0.8, −1.2, −0.2, 0.8; squares sum to 2.8; s² = 2.8/4 = 0.7
//	s_RF = √0.7 = 0.83666002653;  %RSD = 100·0.83666/10.2 = 8.2025492797 % ≤ 20 %
func TestAverageRFByHand(t *testing.T) {
	pts := []RFPoint{{"L0", 0, 0.3, 0, 0}, {"L1", 1, 10, 0, 0}, {"L2", 2, 22, 0, 0}, {"L3", 4, 36, 0, 0}, {"L4", 5, 50, 0, 0}, {"L5", 10, 110, 0, 0}}
	m, err := FitAverageRF(pts, RFOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if m.Internal || m.K != 5 {
		t.Errorf("internal %v, k %d; want external, 5 (the blank gives no RF)", m.Internal, m.K)
	}
	if !slices.Equal(m.RFs, []float64{10, 11, 9, 10, 11}) {
		t.Errorf("RFs %v", m.RFs)
	}
	check := func(what string, got, want, tol float64) {
		t.Helper()
		if math.Abs(got-want) > tol {
			t.Errorf("%s = %.12g, want %.12g (worked by hand)", what, got, want)
		}
	}
	check("RF̄", m.Mean, 10.2, 1e-13)
	check("s_RF", m.SD, math.Sqrt(0.7), 1e-13)
	check("%RSD", m.RSDPct, 8.2025492797, 1e-9)
	if !m.Linear || m.MaxRSDPct != 20 {
		t.Errorf("linear %v at limit %v: want linear at the default 20 %%; %s", m.Linear, m.MaxRSDPct, m.Detail)
	}
	if m.Range != (Range{1, 10}) {
		t.Errorf("range %v, want 1–10 (lowest to highest non-zero standard)", m.Range)
	}
	// x̂0 = 55/10.2 = 5.3921568627; u/x̂0 = (s/RF̄)·√(1/1 + 1/5) = 0.0820254928·1.0954451150 = 0.0898544254
	p, err := m.Predict([]float64{55}, nil, 0, 1)
	if err != nil {
		t.Fatal(err)
	}
	check("x̂0", p.Concentration, 55/10.2, 1e-12)
	check("u/x̂0", p.RelativeSE, 0.0898544254, 1e-9)
	// A limit of 8 % fails the same RFs.
	m8, err := FitAverageRF(pts, RFOptions{MaxRSDPct: 8})
	if err != nil {
		t.Fatal(err)
	}
	if m8.Linear {
		t.Errorf("%%RSD 8.20 passed a limit of 8 %%: %s", m8.Detail)
	}
}

// TestRelativeRFByHand works the internal-standard model by hand (C_is = 10).
//
//	(C_x, A_x, A_is): (1, 500, 5000) (2, 1100, 5000) (5, 2250, 5000) (10, 4800, 4800) (20, 10000, 5000)
//	RRF_i = A_x·C_is/(A_is·C_x) = 1.0, 1.1, 0.9, 1.0, 1.0; RRF̄ = 1.0
//	squares 0, 0.01, 0.01, 0, 0 → s² = 0.02/4 = 0.005, s = 0.0707106781, %RSD = 7.07106781 %
//	sample A_x 2500, A_is 5000, C_is 10, dilution 2: ratio 0.5, x̂0 = 2·0.5·10/1.0 = 10
//	u/x̂0 = 0.0707106781·√(1 + 1/5) = √0.006 = 0.0774596669, u = 0.774596669
func TestRelativeRFByHand(t *testing.T) {
	pts := []RFPoint{{"A", 1, 500, 10, 5000}, {"B", 2, 1100, 10, 5000}, {"C", 5, 2250, 10, 5000}, {"D", 10, 4800, 10, 4800}, {"E", 20, 10000, 10, 5000}}
	m, err := FitAverageRF(pts, RFOptions{})
	if err != nil {
		t.Fatal(err)
	}
	check := func(what string, got, want, tol float64) {
		t.Helper()
		if math.Abs(got-want) > tol {
			t.Errorf("%s = %.12g, want %.12g (worked by hand)", what, got, want)
		}
	}
	if !m.Internal {
		t.Fatal("model not internal")
	}
	check("RRF̄", m.Mean, 1.0, 1e-14)
	check("s_RRF", m.SD, math.Sqrt(0.005), 1e-14)
	check("%RSD", m.RSDPct, 7.07106781, 1e-8)
	p, err := m.Predict([]float64{2500}, []float64{5000}, 10, 2)
	if err != nil {
		t.Fatal(err)
	}
	check("x̂0", p.Concentration, 10, 1e-13)
	check("u(x̂0)", p.StandardError, 0.774596669, 1e-9)
	if p.MeanResponse != 0.5 || p.ISConc != 10 || len(p.Flags) != 0 {
		t.Errorf("ratio %v, C_is %v, flags %v", p.MeanResponse, p.ISConc, p.Flags)
	}
	// Undiluted 25 lies above the highest standard, 20.
	p, err = m.Predict([]float64{12500}, []float64{5000}, 10, 1)
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Contains(p.Flags, FlagAboveRange) || !slices.Contains(p.Flags, FlagExtrapolated) {
		t.Errorf("x̂0 %v flags %v, want above_range and extrapolated", p.Concentration, p.Flags)
	}
}

func TestAverageRFFailsAndRefuses(t *testing.T) {
	// RFs 10, 20, 10, 20, 10: RF̄ 14, s = √((16+36+16+36+16)/4) = √30 = 5.477, %RSD 39.12 > 20 (by hand).
	wide := []RFPoint{{"1", 1, 10, 0, 0}, {"2", 2, 40, 0, 0}, {"3", 3, 30, 0, 0}, {"4", 4, 80, 0, 0}, {"5", 5, 50, 0, 0}}
	m, err := FitAverageRF(wide, RFOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if m.Linear || math.Abs(m.RSDPct-100*math.Sqrt(30)/14) > 1e-12 {
		t.Errorf("linear %v, %%RSD %v; want not linear at 39.12 %%", m.Linear, m.RSDPct)
	}
	// Four levels only: judged not linear whatever the RSD.
	m, err = FitAverageRF(wide[:4], RFOptions{MaxRSDPct: 50})
	if err != nil {
		t.Fatal(err)
	}
	if m.Linear {
		t.Errorf("four levels judged linear: %s", m.Detail)
	}
	bad := map[string][]RFPoint{
		"mixed IS":       {{"1", 1, 10, 5, 100}, {"2", 2, 20, 0, 0}},
		"one RF":         {{"0", 0, 1, 0, 0}, {"1", 1, 10, 0, 0}},
		"negative":       {{"1", 1, -10, 0, 0}, {"2", 2, 20, 0, 0}},
		"IS conc absent": {{"1", 1, 10, 0, 100}, {"2", 2, 20, 0, 100}},
		"NaN":            {{"1", 1, math.NaN(), 0, 0}, {"2", 2, 20, 0, 0}},
		"empty":          {},
	}
	for name, pts := range bad {
		var ie *InputError
		if _, err := FitAverageRF(pts, RFOptions{}); !errors.As(err, &ie) {
			t.Errorf("%s: err = %v, want *InputError", name, err)
		}
	}
	if _, err := ResponseRatios([]float64{1, 2}, []float64{1, 0}); err == nil {
		t.Error("IS response 0 accepted")
	}
}

// TestISRecoveryByHand: calibrator IS responses 100, 110, 90 → mean 100, so
// recovery = the sample's response in percent; default window 60–125 %
// (common ICP-MS practice, from memory), ends included.
func TestISRecoveryByHand(t *testing.T) {
	got, mean, err := ISRecovery([]float64{100, 110, 90}, []float64{59, 60, 80, 125, 126}, ISWindow{})
	if err != nil {
		t.Fatal(err)
	}
	if mean != 100 {
		t.Errorf("mean %v, want 100", mean)
	}
	want := []bool{false, true, true, true, false}
	for i, c := range got {
		if c.Passed != want[i] || math.Abs(c.RecoveryPct-c.Response) > 1e-12 {
			t.Errorf("sample %d: recovery %v passed %v, want %v passed %v (%s)", i, c.RecoveryPct, c.Passed, c.Response, want[i], c.Detail)
		}
	}
	// A method's own window: 80–120 %.
	got, _, err = ISRecovery([]float64{200}, []float64{150, 250}, ISWindow{80, 120})
	if err != nil {
		t.Fatal(err)
	}
	if got[0].Passed || got[1].Passed || got[0].RecoveryPct != 75 || got[1].RecoveryPct != 125 {
		t.Errorf("80–120 %%: %+v", got)
	}
	for _, w := range []ISWindow{{120, 80}, {-1, 50}, {math.NaN(), 100}} {
		if _, _, err := ISRecovery([]float64{1}, []float64{1}, w); err == nil {
			t.Errorf("window %v accepted", w)
		}
	}
}

type rfGolden struct {
	StatsmodelsVersion string    `json:"statsmodels_version"`
	ISConc             float64   `json:"is_conc"`
	Conc               []float64 `json:"conc"`
	Area               []float64 `json:"area"`
	ISArea             []float64 `json:"is_area"`
	Ratios             []float64 `json:"ratios"`
	MeanRRF            float64   `json:"mean_rrf"`
	SDRRF              float64   `json:"sd_rrf"`
	SEMeanRRF          float64   `json:"se_mean_rrf"`
	RSDPct             float64   `json:"rsd_pct_numpy"`
	Confidence         float64   `json:"confidence"`
	Predictions        []struct {
		Areas   []float64 `json:"areas"`
		ISAreas []float64 `json:"is_areas"`
		Ratio   float64   `json:"mean_ratio"`
		XHat    float64   `json:"x_hat"`
		SE      float64   `json:"se"`
		Low     float64   `json:"low"`
		High    float64   `json:"high"`
	} `json:"predictions"`
	RatioLine struct {
		Params     []float64 `json:"params"`
		BSE        []float64 `json:"bse"`
		ResidualSD float64   `json:"residual_sd"`
		RSquared   float64   `json:"rsquared"`
	} `json:"ratio_line"`
}

// TestRFStatsmodelsGolden checks the relative response factor model and
// the ratio helper against testdata/golden/statsmodels_rf.json, made by
// testdata/gen/make_golden_rf.py with statsmodels 0.13.5 (Debian
// python3-statsmodels): RRF̄ and s_RRF as the slope and residual SD of the
// line through the origin fitted with weights 1/x² to C_is·A_x/A_is; the
// interval as the inversion of statsmodels' prediction band; and a line with
// intercept on the ratios from calib.Fit against statsmodels OLS.
func TestRFStatsmodelsGolden(t *testing.T) {
	raw, err := os.ReadFile(filepath.Join("..", "testdata", "golden", "statsmodels_rf.json"))
	if err != nil {
		t.Fatal(err)
	}
	var g rfGolden
	if err := json.Unmarshal(raw, &g); err != nil {
		t.Fatal(err)
	}
	cmp := func(what string, got, want, rel float64) {
		t.Helper()
		if !closeTo(got, want, rel, 0) {
			t.Errorf("%s: got %.15g, statsmodels %s %.15g", what, got, g.StatsmodelsVersion, want)
		}
	}
	ratios, err := ResponseRatios(g.Area, g.ISArea)
	if err != nil {
		t.Fatal(err)
	}
	pts := make([]RFPoint, len(g.Conc))
	fitPts := make([]Point, len(g.Conc))
	for i := range g.Conc {
		cmp("ratio", ratios[i], g.Ratios[i], 1e-15)
		pts[i] = RFPoint{Level: strconv.FormatFloat(g.Conc[i], 'g', -1, 64), Conc: g.Conc[i], Response: g.Area[i], ISConc: g.ISConc, ISResponse: g.ISArea[i]}
		fitPts[i] = Point{Level: pts[i].Level, X: g.Conc[i], Y: ratios[i]}
	}
	m, err := FitAverageRF(pts, RFOptions{Confidence: g.Confidence})
	if err != nil {
		t.Fatal(err)
	}
	cmp("RRF̄", m.Mean, g.MeanRRF, 1e-13)
	cmp("s_RRF", m.SD, g.SDRRF, 1e-12)
	cmp("s_RRF/√k", m.SD/math.Sqrt(float64(m.K)), g.SEMeanRRF, 1e-12)
	cmp("%RSD (numpy std ddof=1)", m.RSDPct, g.RSDPct, 1e-12)
	for _, gp := range g.Predictions {
		p, err := m.Predict(gp.Areas, gp.ISAreas, g.ISConc, 1)
		if err != nil {
			t.Fatal(err)
		}
		cmp("mean ratio", p.MeanResponse, gp.Ratio, 1e-14)
		cmp("x̂0", p.Concentration, gp.XHat, 1e-13)
		cmp("u(x̂0)", p.StandardError, gp.SE, 1e-11)
		if !p.Interval.Bounded {
			t.Fatalf("interval unbounded; statsmodels band closes at [%v, %v]", gp.Low, gp.High)
		}
		cmp("interval low (inverted band)", p.Interval.Low, gp.Low, 1e-10)
		cmp("interval high (inverted band)", p.Interval.High, gp.High, 1e-10)
	}
	rep := fitOrFatal(t, fitPts, Options{Model: Linear, Weighting: WeightNone})
	for j := range g.RatioLine.Params {
		cmp("ratio line coefficient", rep.Coefficients[j], g.RatioLine.Params[j], 1e-11)
		cmp("ratio line SE", rep.StandardErrors[j], g.RatioLine.BSE[j], 1e-10)
	}
	cmp("ratio line residual SD", rep.ResidualSD, g.RatioLine.ResidualSD, 1e-11)
	cmp("ratio line R²", rep.RSquared, g.RatioLine.RSquared, 1e-13)
}

// FuzzAverageRF: FitAverageRF and Predict never panic; a model has RF̄ > 0,
// a finite %RSD, and a bounded interval that contains x̂0.
func FuzzAverageRF(f *testing.F) {
	f.Add(1.0, 10.0, 2.0, 22.0, 4.0, 36.0, 55.0, 5000.0)
	f.Add(0.0, 1.0, 1.0, 1.0, 1e-300, 1e300, 1.0, 0.0)
	f.Fuzz(func(t *testing.T, c1, a1, c2, a2, c3, a3, y0, is float64) {
		pts := []RFPoint{{"1", c1, a1, 0, 0}, {"2", c2, a2, 0, 0}, {"3", c3, a3, 0, 0}}
		if is > 0 {
			for i := range pts {
				pts[i].ISConc, pts[i].ISResponse = 10, is
			}
		}
		m, err := FitAverageRF(pts, RFOptions{MinLevels: 2})
		if err != nil {
			return
		}
		if !(m.Mean > 0) || math.IsNaN(m.RSDPct) {
			t.Fatalf("model %+v", m)
		}
		var p RFPrediction
		if m.Internal {
			p, err = m.Predict([]float64{y0}, []float64{is}, 10, 1)
		} else {
			p, err = m.Predict([]float64{y0}, nil, 0, 1)
		}
		if err != nil {
			return
		}
		if p.Interval.Bounded && !(p.Interval.Low <= p.Concentration && p.Concentration <= p.Interval.High) {
			t.Fatalf("x̂0 %v outside [%v, %v]", p.Concentration, p.Interval.Low, p.Interval.High)
		}
	})
}
