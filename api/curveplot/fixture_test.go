package curveplot

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"

	"curvekeeper/calib"
)

// standard is one invented reading of a nitrate standard on an invented
// ion chromatograph (response: peak area).
type standard struct {
	level    string
	x, y     float64
	excluded bool
}

// sixteenStandards are 8 levels × 2 replicates of an invented calibration,
// slightly curved and heteroscedastic; L5's second replicate is a bad
// injection that the analyst excluded, so the fit uses 15 readings.
var sixteenStandards = []standard{
	{"L1", 0.5, 0.061, false}, {"L1", 0.5, 0.058, false},
	{"L2", 1, 0.118, false}, {"L2", 1, 0.124, false},
	{"L3", 2, 0.247, false}, {"L3", 2, 0.239, false},
	{"L4", 5, 0.601, false}, {"L4", 5, 0.617, false},
	{"L5", 10, 1.228, false}, {"L5", 10, 1.502, true},
	{"L6", 20, 2.431, false}, {"L6", 20, 2.477, false},
	{"L7", 35, 4.262, false}, {"L7", 35, 4.198, false},
	{"L8", 50, 6.031, false}, {"L8", 50, 6.102, false},
}

// linearReport builds, by hand, the Report of a weighted (1/x) straight-line
// fit of the standards, with every exported field that Curve and AltText
// read. The coefficients come from gonum's stat.LinearRegression (a
// general-purpose statistics library, outside this project); the covariance
// s²(XᵀWX)⁻¹ from a gonum matrix inverse; the sufficient statistics from
// their definitions. It does not call calib.Fit.
func linearReport(t testing.TB, data []standard) *calib.Report {
	t.Helper()
	var x, y, w []float64
	for _, s := range data {
		if !s.excluded {
			x, y, w = append(x, s.x), append(y, s.y), append(w, 1/s.x)
		}
	}
	n := float64(len(x))
	var sw float64
	for _, v := range w {
		sw += v
	}
	for i := range w {
		w[i] *= n / sw // Σw = n
	}
	b0, b1 := stat.LinearRegression(x, y, w, false)

	var sumW, sumWX, sumWY float64
	for i := range x {
		sumW += w[i]
		sumWX += w[i] * x[i]
		sumWY += w[i] * y[i]
	}
	xbar, ybar := sumWX/sumW, sumWY/sumW
	var sxx, ssr, sst, sumWX2 float64
	for i := range x {
		sxx += w[i] * (x[i] - xbar) * (x[i] - xbar)
		e := y[i] - b0 - b1*x[i]
		ssr += w[i] * e * e
		sst += w[i] * (y[i] - ybar) * (y[i] - ybar)
		sumWX2 += w[i] * x[i] * x[i]
	}
	df := len(x) - 2
	s2 := ssr / float64(df)

	xtwx := mat.NewDense(2, 2, []float64{sumW, sumWX, sumWX, sumWX2})
	var inv mat.Dense
	if err := inv.Inverse(xtwx); err != nil {
		t.Fatalf("invert XᵀWX: %v", err)
	}
	cov := [][]float64{
		{s2 * inv.At(0, 0), s2 * inv.At(0, 1)},
		{s2 * inv.At(1, 0), s2 * inv.At(1, 1)},
	}

	r := &calib.Report{
		Model: calib.Linear, Weighting: calib.WeightInvX, WeightingRequested: calib.WeightInvX,
		Coefficients:   []float64{b0, b1},
		StandardErrors: []float64{math.Sqrt(cov[0][0]), math.Sqrt(cov[1][1])},
		Covariance:     cov,
		ResidualSD:     math.Sqrt(s2),
		DF:             df,
		RSquared:       1 - ssr/sst,
		N:              len(x),
		Confidence:     0.95,
		SumW:           sumW, MeanXW: xbar, MeanYW: ybar, SxxW: sxx, SumWX2: sumWX2,
		Range:   calib.Range{Low: 0.5, High: 50},
		Verdict: "pass",
		Engine:  calib.EngineVersion,
	}
	levels := map[string]bool{}
	k := 0
	for _, s := range data {
		p := calib.PointResult{Level: s.level, X: s.x, Y: s.y, Excluded: s.excluded, Fitted: b0 + b1*s.x}
		p.Residual = s.y - p.Fitted
		if !s.excluded {
			levels[s.level] = true
			p.Weight = w[k]
			k++
			f := []float64{1, s.x}
			h := p.Weight * (f[0]*(inv.At(0, 0)*f[0]+inv.At(0, 1)*f[1]) + f[1]*(inv.At(1, 0)*f[0]+inv.At(1, 1)*f[1]))
			p.Leverage = h
			p.WeightedResidual = math.Sqrt(p.Weight) * p.Residual
			p.Studentized = p.WeightedResidual / (r.ResidualSD * math.Sqrt(1-h))
		}
		r.Points = append(r.Points, p)
	}
	r.Levels = len(levels)
	return r
}

// failedReport is what the engine reports for readings it cannot fit: the
// standards, no coefficients, a failed verdict.
func failedReport() *calib.Report {
	return &calib.Report{
		Model: calib.Linear, Weighting: calib.WeightNone, Confidence: 0.95, Verdict: "fail",
		Points: []calib.PointResult{
			{Level: "L1", X: 5, Y: 0.61}, {Level: "L1", X: 5, Y: 0.60}, {Level: "L1", X: 5, Y: 0.62},
		},
		Checks: []calib.Check{{Name: calib.CheckMinLevels, Statistic: 1, Limit: 5, Mandatory: true, Computed: true,
			Detail: "1 level, 5 required"}},
	}
}
