package calib_test

import (
	"errors"
	"fmt"

	"curvekeeper/calib"
)

// An invented nitrate run on an invented photometer: 8 levels in duplicate.
var nitrate = []calib.Point{
	{Level: "L1", X: 0.5, Y: 0.0368}, {Level: "L1", X: 0.5, Y: 0.0354},
	{Level: "L2", X: 1, Y: 0.0608}, {Level: "L2", X: 1, Y: 0.0586},
	{Level: "L3", X: 2, Y: 0.1091}, {Level: "L3", X: 2, Y: 0.1070},
	{Level: "L4", X: 5, Y: 0.2568}, {Level: "L4", X: 5, Y: 0.2510},
	{Level: "L5", X: 10, Y: 0.4861}, {Level: "L5", X: 10, Y: 0.5024},
	{Level: "L6", X: 20, Y: 0.9828}, {Level: "L6", X: 20, Y: 0.9526},
	{Level: "L7", X: 50, Y: 2.4484}, {Level: "L7", X: 50, Y: 2.3928},
	{Level: "L8", X: 100, Y: 4.7448}, {Level: "L8", X: 100, Y: 4.8943},
}

// Fit a 1/x² weighted line and read the verdict and the checks.
func ExampleFit() {
	rep, err := calib.Fit(nitrate, calib.Options{Model: calib.Linear, Weighting: calib.WeightInvX2})
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("y = %.5f + %.5f·x, s(y/x) = %.4g, df = %d\n", rep.Coefficients[0], rep.Coefficients[1], rep.ResidualSD, rep.DF)
	fmt.Println("verdict:", rep.Verdict)
	for _, c := range rep.Checks {
		if c.Mandatory {
			fmt.Printf("%s passed=%v\n", c.Name, c.Passed)
		}
	}
	// Output:
	// y = 0.01198 + 0.04808·x, s(y/x) = 0.001161, df = 14
	// verdict: pass
	// min_levels passed=true
	// mandel passed=true
	// back_calculation passed=true
	// r_squared passed=true
	// monotonic passed=true
}

// Predict an unknown read twice, diluted 1:10, with its Fieller interval.
func ExampleReport_Predict() {
	rep, err := calib.Fit(nitrate, calib.Options{Model: calib.Linear, Weighting: calib.WeightInvX2})
	if err != nil {
		fmt.Println(err)
		return
	}
	p, err := rep.Predict([]float64{0.300, 0.310}, 10, 0.95)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("%.2f mg/L ± %.2f (SE), 95 %% interval [%.2f, %.2f] by %s, flags %v\n",
		p.Concentration, p.StandardError, p.Interval.Low, p.Interval.High, p.Method, p.Flags)
	fmt.Println(len(p.Cautions) > 0)
	// Output:
	// 60.94 mg/L ± 0.91 (SE), 95 % interval [59.00, 62.91] by fieller, flags []
	// true
}

// Automatic weighting reports every candidate's score and the largest share
// of the total weight any one level would hold under it; a candidate giving
// one level more than half is passed over, and 1/s² needs three readings per
// level by default.
func ExampleFit_autoWeighting() {
	rep, err := calib.Fit(nitrate, calib.Options{Model: calib.Linear, Weighting: calib.WeightAuto})
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, c := range rep.WeightCandidates {
		if !c.Scored {
			fmt.Printf("%-7s skipped\n", c.Weighting)
			continue
		}
		fmt.Printf("%-7s Σ|%%RE| = %6.2f heaviest level %3.0f %% chosen=%v\n", c.Weighting, c.SumAbsRE, 100*c.MaxLevelShare, c.Chosen)
	}
	// Output:
	// none    Σ|%RE| =  26.94 heaviest level  12 % chosen=true
	// 1/x^0.5 Σ|%RE| =  26.94 heaviest level  33 % chosen=false
	// 1/x     Σ|%RE| =  26.95 heaviest level  52 % chosen=false
	// 1/x^2   Σ|%RE| =  26.95 heaviest level  75 % chosen=false
	// 1/y^0.5 Σ|%RE| =  26.95 heaviest level  29 % chosen=false
	// 1/y     Σ|%RE| =  26.95 heaviest level  45 % chosen=false
	// 1/y^2   Σ|%RE| =  26.95 heaviest level  66 % chosen=false
	// 1/s^2   skipped
}

// A run that cannot be fitted still gets a report to store as evidence.
func ExampleFailedReport() {
	run := []calib.Point{{Level: "L1", X: 5, Y: 0.25}, {Level: "L1", X: 5, Y: 0.26}}
	_, err := calib.Fit(run, calib.Options{})
	var ie *calib.InputError
	fmt.Println(errors.As(err, &ie), ie.Field)
	rep := calib.FailedReport(run, calib.Options{}, err)
	fmt.Println(rep.Verdict, rep.Checks[0].Name, rep.Checks[0].Passed, rep.Checks[1].Computed)
	// Output:
	// true points
	// fail min_levels false false
}

// The default policy and the checks it makes mandatory.
func ExampleDefaultPolicy() {
	p := calib.DefaultPolicy()
	fmt.Println(p.MinLevels, p.BackCalcTolerancePct, p.BackCalcLowTolerancePct, p.MinRSquared, p.Mandatory)
	// Output:
	// 6 15 20 0.99 [min_levels back_calculation r_squared mandel monotonic rf_rsd]
}
