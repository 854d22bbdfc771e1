package calib

import (
	"math"
	"strconv"
)

// DefaultPolicy returns the acceptance thresholds used when a laboratory has
// configured none. They are defaults drawn from published guidance; the
// laboratory's accreditation, its regulator and its method SOP take
// precedence and override any of them.
//
//   - MinLevels 6: ICH M10 (2022) asks for at least six non-zero calibration
//     levels (plus blank and zero sample, which are not regressed). US EPA
//     SW-846 Method 8000D accepts five for a line (six for a quadratic); the
//     stricter six is chosen so one default serves every model.
//   - MandelAlpha 0.01: ISO 8466-1 Mandel fitting test at the 99 % level.
//   - LackOfFitAlpha 0.05: conventional level of the lack-of-fit F-test
//     (Montgomery, Design and Analysis of Experiments).
//   - HomoscedasticityAlpha 0.01: ISO 8466-1 variance test at the 99 % level.
//   - BackCalcTolerancePct 15, BackCalcLowTolerancePct 20,
//     BackCalcMinPassFraction 0.75: ICH M10 (2022) chromatographic assays,
//     back-calculated standards within ±15 % of nominal (±20 % at the lowest
//     level), at least 75 % of the standards passing.
//   - MinRSquared 0.99: US EPA SW-846 Method 8000D (r ≥ 0.995, r² ≥ 0.99).
//   - MaxRSEPct 20: US EPA SW-846 Method 8000D relative standard error.
//   - MaxRFRSDPct 20: the average response factor model's %RSD of the RFs
//     (US EPA SW-846 Method 8000D, from memory; DefaultRFMaxRSDPct).
//   - InterceptAlpha 0.05, RunsAlpha 0.05: conventional significance levels.
//   - OutlierStudentized 3: |internally studentised residual| > 3 is an
//     outlier (common practice; > 2 is only suspect).
//   - OutlierCooksD 1: Cook's distance > 1 is influential (common practice).
//
// Mandatory by default: min_levels, back_calculation, r_squared, mandel,
// monotonic and rf_rsd (computed for the average RF model only, whose
// linearity check it is). The first three are the acceptance criteria the cited guidance
// states for a calibration run (ICH M10 levels and back-calculation, EPA
// 8000D r²), Mandel's test is ISO 8466-1's rule for whether the chosen model
// may be used at all, and a curve that is not strictly monotonic over its
// working range cannot turn a response into one concentration (common
// practice). The other checks stay advisory: lack of fit and homoscedasticity
// need replicates a run may not have; the residual runs test has little
// power with six to ten levels; the relative standard error is EPA's
// alternative to r², not an addition; an intercept different from zero or a
// single influential reading calls for a reviewer's judgement rather than an
// automatic rejection.
func DefaultPolicy() Policy {
	return Policy{
		MinLevels:               6,
		MandelAlpha:             0.01,
		LackOfFitAlpha:          0.05,
		HomoscedasticityAlpha:   0.01,
		BackCalcTolerancePct:    15,
		BackCalcLowTolerancePct: 20,
		BackCalcMinPassFraction: 0.75,
		MinRSquared:             0.99,
		MaxRSEPct:               20,
		MaxRFRSDPct:             DefaultRFMaxRSDPct,
		InterceptAlpha:          0.05,
		RunsAlpha:               0.05,
		OutlierStudentized:      3,
		OutlierCooksD:           1,
		Mandatory:               []string{CheckMinLevels, CheckBackCalculation, CheckRSquared, CheckMandel, CheckMonotonic, CheckRFRSD},
	}
}

// defaultPolicy is DefaultPolicy for internal use: Fit only reads its
// Mandatory list, so one copy is shared rather than allocated per fit.
var defaultPolicy = DefaultPolicy()

// checkNames lists every check in the order it is reported.
var checkNames = [...]string{
	CheckMinLevels, CheckMandel, CheckLackOfFit, CheckHomoscedasticity,
	CheckBackCalculation, CheckRSquared, CheckRSE, CheckIntercept,
	CheckResidualRuns, CheckOutliers, CheckMonotonic,
}

// isZero reports whether p is the zero Policy, which Fit replaces by
// DefaultPolicy.
func (p Policy) isZero() bool {
	return p.MinLevels == 0 && p.MandelAlpha == 0 && p.LackOfFitAlpha == 0 &&
		p.HomoscedasticityAlpha == 0 && p.BackCalcTolerancePct == 0 &&
		p.BackCalcLowTolerancePct == 0 && p.BackCalcMinPassFraction == 0 &&
		p.MinRSquared == 0 && p.MaxRSEPct == 0 && p.InterceptAlpha == 0 &&
		p.RunsAlpha == 0 && p.OutlierStudentized == 0 && p.OutlierCooksD == 0 &&
		len(p.Mandatory) == 0
}

// validate checks every threshold: significance levels in (0, 1), fractions
// in [0, 1], tolerances and limits finite and non-negative, and mandatory
// checks named by the Check constants.
func (p Policy) validate() error {
	alphas := []struct {
		field string
		v     float64
	}{
		{"options.policy.mandel_alpha", p.MandelAlpha},
		{"options.policy.lack_of_fit_alpha", p.LackOfFitAlpha},
		{"options.policy.homoscedasticity_alpha", p.HomoscedasticityAlpha},
		{"options.policy.intercept_alpha", p.InterceptAlpha},
		{"options.policy.runs_alpha", p.RunsAlpha},
	}
	for _, a := range alphas {
		if !(a.v > 0 && a.v < 1) {
			return inputErr(a.field, "significance level must lie in (0, 1), got %v", a.v)
		}
	}
	nonNeg := []struct {
		field string
		v     float64
	}{
		{"options.policy.back_calc_tolerance_pct", p.BackCalcTolerancePct},
		{"options.policy.back_calc_low_tolerance_pct", p.BackCalcLowTolerancePct},
		{"options.policy.max_rse_pct", p.MaxRSEPct},
		{"options.policy.max_rf_rsd_pct", p.MaxRFRSDPct},
		{"options.policy.outlier_studentized", p.OutlierStudentized},
		{"options.policy.outlier_cooks_d", p.OutlierCooksD},
	}
	for _, a := range nonNeg {
		if !(a.v >= 0) || math.IsInf(a.v, 0) {
			return inputErr(a.field, "must be a finite number ≥ 0, got %v", a.v)
		}
	}
	if !(p.BackCalcMinPassFraction >= 0 && p.BackCalcMinPassFraction <= 1) {
		return inputErr("options.policy.back_calc_min_pass_fraction", "must lie in [0, 1], got %v", p.BackCalcMinPassFraction)
	}
	if !(p.MinRSquared >= 0 && p.MinRSquared <= 1) {
		return inputErr("options.policy.min_r_squared", "must lie in [0, 1], got %v", p.MinRSquared)
	}
	if p.MinLevels < 1 {
		return inputErr("options.policy.min_levels", "must be at least 1, got %d", p.MinLevels)
	}
	for i, name := range p.Mandatory {
		known := name == CheckDrift || name == CheckRFRSD // drift: computed at ingest against history, see DriftCheck
		for _, c := range checkNames {
			if name == c {
				known = true
				break
			}
		}
		if !known {
			return inputErr("options.policy.mandatory["+strconv.Itoa(i)+"]", "unknown check %q", name)
		}
	}
	return nil
}

// mandatory reports whether the check name is mandatory under p.
func (p Policy) mandatory(name string) bool {
	for _, m := range p.Mandatory {
		if m == name {
			return true
		}
	}
	return false
}
