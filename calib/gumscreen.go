package calib

import "math"

// Thresholds of ScreenGUM. Both are this engine's choice, in the spirit of
// common practice: the delta method for a ratio of estimates is usually
// taken as adequate while Fieller's g stays below about 0.05 (a rule of
// thumb found in the bioassay literature, Finney; recalled from memory),
// and an interval whose two arms differ by more than a tenth of its width
// is no longer described by y ± U.
const (
	// ScreenFiellerG: a straight line's inverse prediction is in doubt
	// when g = t²·s²(b1)/b1² exceeds it.
	ScreenFiellerG = 0.05
	// ScreenAsymmetry: any model's is in doubt when the prediction's
	// interval is open, or when |(H − x̂0) − (x̂0 − L)|/(H − L) exceeds it.
	ScreenAsymmetry = 0.1
)

// GUMScreen says whether the GUM linearisation of a result's calibration
// term is in doubt, and why (JCGM 101 §5.7: Monte Carlo is then the better
// propagation).
type GUMScreen struct {
	InDoubt bool
	// FiellerG is g = t²·s²(b1)/b1² of a straight line (t at the report's
	// confidence, ν = n − p); NaN for other models.
	FiellerG float64
	// Asymmetry is |(H − x̂0) − (x̂0 − L)|/(H − L) of the prediction's
	// bounded interval; NaN when the interval is open.
	Asymmetry float64
	Reason    string // empty when not in doubt
}

// ScreenGUM screens the prediction pr of r: in doubt when the interval is
// open, when it is asymmetric about x̂0 by more than ScreenAsymmetry of its
// width (a ratio x̂0 with a weakly determined slope, a curve near its
// asymptote), or, for a straight line, when Fieller's g exceeds
// ScreenFiellerG. It allocates nothing; a prediction without a single
// concentration, or of a curve without a fit, is not screened (it has no
// budget).
func (r *Report) ScreenGUM(pr Prediction) GUMScreen {
	s := GUMScreen{FiellerG: math.NaN(), Asymmetry: math.NaN()}
	if !pr.HasEstimate() || len(r.Coefficients) == 0 {
		return s
	}
	if r.DF >= 1 && (r.Model == Linear || originLine(r.Model)) {
		k := 1
		if originLine(r.Model) {
			k = 0
		}
		if len(r.Coefficients) > k && len(r.Covariance) > k && len(r.Covariance[k]) > k && r.Coefficients[k] != 0 {
			conf := r.Confidence
			if !(conf > 0 && conf < 1) {
				conf = 0.95
			}
			t := studentT(1-(1-conf)/2, r.DF)
			b := r.Coefficients[k]
			s.FiellerG = t * t * r.Covariance[k][k] / (b * b)
		}
	}
	iv := pr.Interval
	if iv.Bounded && iv.High > iv.Low {
		s.Asymmetry = math.Abs((iv.High-pr.Concentration)-(pr.Concentration-iv.Low)) / (iv.High - iv.Low)
	}
	switch {
	case !iv.Bounded:
		s.Reason = "the prediction interval of x̂0 is open"
	case s.FiellerG > ScreenFiellerG:
		s.Reason = "the slope is weakly determined (Fieller's g above 0.05)"
	case s.Asymmetry > ScreenAsymmetry:
		s.Reason = "the prediction interval of x̂0 is asymmetric (its arms differ by more than 10 % of its width)"
	}
	s.InDoubt = s.Reason != ""
	return s
}
