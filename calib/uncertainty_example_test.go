package calib_test

import (
	"fmt"

	"curvekeeper/calib"
)

// A result r = c0·V/a (an invented extraction: c0 from the curve, the
// extract volume V and the surface a, each with its own uncertainty),
// combined by the GUM law with a t-based coverage factor, then compared
// with a limit under a guard band. By hand: relative u = 0.018/0.26 =
// 0.0692, 0.0031/(√3·0.332) = 0.0054, 0.19/5.73 = 0.0332; u_c/r = 0.0770;
// ν_eff = 13/0.8094² = 19.8, k = t(0.975; 19) = 2.093; r = 0.015065,
// U = 2.093·0.0770·0.015065 = 0.0024.
func ExampleComputeBudget() {
	c0 := calib.UncertaintyTerm{Name: "c0 from the curve", Source: calib.SourceCalibration,
		Value: 0.26, StdUncertainty: 0.018, DF: 13}
	v := calib.RectangularTerm("extract volume", calib.SourcePreparation, 0.332, 0.0031)
	a := calib.NormalTerm("surface", calib.SourceOther, 5.73, 0.38, 2)
	a.Exponent = -1
	b, err := calib.ComputeBudget(calib.BudgetInput{Terms: []calib.UncertaintyTerm{c0, v, a}})
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("r = %s ± %s mg/dm² (k = %.2f, ν_eff = %.1f)\n", b.ValueText, b.ExpandedText, b.CoverageFactor, b.EffectiveDF)
	for _, t := range b.Terms {
		fmt.Printf("  %-18s %4.1f %% of u_c²\n", t.Name, 100*t.Share)
	}
	conf, err := calib.Decide(b.ValueRounded, b.Expanded, calib.UpperLimit(0.05, "mg/dm²"), calib.RuleGuardBand)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println("against 0.05 mg/dm²:", conf.Outcome)
	// Output:
	// r = 0.0151 ± 0.0024 mg/dm² (k = 2.09, ν_eff = 19.8)
	//   c0 from the curve  80.9 % of u_c²
	//   extract volume      0.5 % of u_c²
	//   surface            18.6 % of u_c²
	// against 0.05 mg/dm²: pass
}
