package reported_test

import (
	"fmt"

	"curvekeeper/lab/reported"
)

func ExampleReport() {
	// A soil digest: x̂0 = 12.36 ug/L in the measured solution, diluted
	// tenfold; 0.500 g digested to 50 mL; 80 % dry matter.
	v, err := reported.Report(reported.Sample{X0: 12.36, X0Unit: "ug/L", Dilution: 10,
		SampleAmount: 0.5, SampleAmountUnit: "g", FinalVolume: 50, FinalVolumeUnit: "mL", DryFraction: 0.8},
		reported.Method{Unit: "mg/kg", ReportingLimit: 20, DetectionLimit: 5})
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println(v.Text, v.Unit, v.Qualifiers[0].Code, "—", v.Rule)
	// Output: 15.4 mg/kg EV — 3 significant figures, round half to even
}
