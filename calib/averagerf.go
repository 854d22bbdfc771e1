package calib

import (
	"math"
	"strconv"
)

// AverageRF is the average response factor model: y = RF̄·x with RF̄ the
// mean of the standards' response factors RF_i = y_i/x_i (with an internal
// standard y is the response ratio A_x/A_is, so RF_i is the relative
// response factor divided by the internal standard's concentration),
// coefficients [RF̄]. Its linearity check is the %RSD of the RFs
// (CheckRFRSD); x̂0 = ȳ0/RF̄ (US EPA SW-846 8000 §11.4.3 and §11.5, as
// transcribed; see RFSource).
//
// RF̄ is the weighted least-squares slope of the line through the origin
// with weights 1/x²: Σ(y_i − b·x_i)²/x_i² = Σ(RF_i − b)² is least at
// b = RF̄, and the weighted residual SD is s_RF. Fit therefore fits that
// line (every diagnostic, back-calculation and limit of the Report is the
// origin line's), then reports the RFs beside it in Report.RF; Predict
// uses the RF model's own uncertainty (RFModel.Predict).
const AverageRF Model = "average_rf"

// CheckRFRSD is the average RF model's linearity check: %RSD of the
// response factors ≤ Policy.MaxRFRSDPct (default DefaultRFMaxRSDPct).
const CheckRFRSD = "rf_rsd"

// rfReportSource names where the RFs of a Report come from: with an
// internal standard y is the ratio A_x/A_is, so RF_i is the relative
// response factor of RFSource divided by C_is (the same in every standard
// and sample, so x̂0 is the same).
const rfReportSource = "RF_i = y_i/x_i; with an internal standard y = A_x/A_is and RF_i is the RRF (A_x·C_is)/(A_is·C_x) of US EPA SW-846 Method 8000 §11.4.3 (as transcribed) divided by C_is; average-RF linearity %RSD ≤ 20 % after SW-846 8000D (from memory); the laboratory's method overrides it"

// RFDetails is what the average RF model adds to a Report.
type RFDetails struct {
	RFs       []float64 // RF_i of every fitted non-zero reading, in input order
	Levels    []string  // the level of each RF
	Mean      float64   // RF̄
	SD        float64   // s_RF (k − 1 degrees of freedom)
	RSDPct    float64   // 100·s_RF/RF̄
	K         int       // number of RFs
	MaxRSDPct float64   // the policy's limit
	Blanks    int       // readings at nominal zero: no RF, listed as excluded
	Basis     string    // what RF means for these readings
	Source    string
}

// RFRSDLimit returns the policy's %RSD limit of the average RF model,
// DefaultRFMaxRSDPct when it sets none.
func (p Policy) RFRSDLimit() float64 {
	if p.MaxRFRSDPct == 0 {
		return DefaultRFMaxRSDPct
	}
	return p.MaxRFRSDPct
}

// fitAverageRFReport fits the average RF model: the line through the
// origin with weights 1/x² over the non-zero readings (readings at nominal
// zero are blanks: they give no RF and are listed as excluded, so the
// Report's points keep the run's order), its checks plus CheckRFRSD, and
// the RFs.
func fitAverageRFReport(points []Point, opt Options) (*Report, error) {
	// A reading at nominal zero is listed, as excluded: it gives no RF.
	nz := append([]Point(nil), points...)
	blanks := 0
	for i := range nz {
		if nz[i].X == 0 {
			nz[i].Excluded = true
			blanks++
		}
	}
	o := opt
	o.Model, o.Weighting = LinearOrigin, WeightInvX2
	r, err := Fit(nz, o)
	if err != nil {
		return nil, err
	}
	pol := opt.Policy
	if pol.isZero() {
		pol = defaultPolicy
	}
	var rp []RFPoint
	for _, p := range nz {
		if !p.Excluded {
			rp = append(rp, RFPoint{Level: p.Level, Conc: p.X, Response: p.Y})
		}
	}
	m, err := FitAverageRF(rp, RFOptions{MaxRSDPct: pol.RFRSDLimit(), MinLevels: max(pol.MinLevels, 1), Confidence: r.Confidence})
	if err != nil {
		return nil, err
	}
	// The model fixes its weights (1/x²): the method's weighting is not used.
	r.Model, r.WeightingRequested = AverageRF, WeightInvX2
	// RF̄ itself, not the QR solution it equals up to rounding.
	r.Coefficients[0] = m.Mean
	r.RF = &RFDetails{RFs: m.RFs, Levels: m.Levels, Mean: m.Mean, SD: m.SD, RSDPct: m.RSDPct, K: m.K,
		MaxRSDPct: m.MaxRSDPct, Blanks: blanks, Source: rfReportSource,
		Basis: "RF_i = y_i/x_i of each non-zero reading (y the response, or the response ratio A_x/A_is with an internal standard); readings at nominal zero give none and are listed as excluded from the fit"}
	c := Check{Name: CheckRFRSD, Statistic: m.RSDPct, Limit: m.MaxRSDPct, Computed: true, Passed: m.RSDPct <= m.MaxRSDPct,
		Mandatory: pol.mandatory(CheckRFRSD), Source: "US EPA SW-846 Method 8000D: the average response factor may be used when the %RSD of the RFs is ≤ 20 % (from memory; the laboratory's method sets the limit)",
		Detail: "%RSD of the " + strconv.Itoa(m.K) + " response factors " + strconv.FormatFloat(m.RSDPct, 'g', 4, 64) +
			" % against a maximum of " + strconv.FormatFloat(m.MaxRSDPct, 'g', -1, 64) + " % (RF̄ = " + fmtG(m.Mean) + ", s_RF = " + fmtG(m.SD) + ")."}
	r.Checks = append(r.Checks, c)
	r.Verdict = verdict(r.Checks)
	return r, nil
}

// predictRF sets x̂0 = ȳ0/RF̄, its standard error
// u(x̂0) = x̂0·(s_RF/RF̄)·√(1/m + 1/k) and the t-pivot interval of
// RFModel.Predict on pr; it returns the undiluted x̂0.
func (r *Report) predictRF(y0 float64, m int, t float64, pr *Prediction) (float64, bool) {
	rf := r.RF
	x0 := y0 / rf.Mean
	if math.IsInf(x0, 0) || math.IsNaN(x0) {
		return 0, false
	}
	root := math.Sqrt(1/float64(m) + 1/float64(rf.K))
	pr.StandardError = math.Abs(x0) * rf.SD / rf.Mean * root
	pr.Method = "average_rf_t_pivot"
	half := t * rf.SD * root
	if rf.Mean > half && y0 >= 0 {
		pr.Interval.Low, pr.Interval.High, pr.Interval.Bounded = y0/(rf.Mean+half), y0/(rf.Mean-half), true
	}
	return x0, true
}

// originLine reports whether m is a line through the origin: LinearOrigin,
// or AverageRF, whose Report is that line with weights 1/x².
func originLine(m Model) bool { return m == LinearOrigin || m == AverageRF }
