package ucum_test

import (
	"fmt"

	"curvekeeper/lab/ucum"
)

func ExampleConvert() {
	v, err := ucum.Convert(90, "mg/dL", "g/L")
	fmt.Println(v, err)
	_, err = ucum.Convert(1, "MG/L", "ug/L")
	fmt.Println(err != nil)
	// Output:
	// 0.9 <nil>
	// true
}

func ExampleConvertMolar() {
	// Nitrate-N: 1 mmol/L of N at 14.007 g/mol.
	v, err := ucum.ConvertMolar(1, "mmol/L", "mg/L", 14.007)
	fmt.Println(v, err)
	// Output: 14.007 <nil>
}
