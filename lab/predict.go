package lab

import (
	"errors"
	"fmt"

	"curvekeeper/calib"
)

// Predict quantifies the responses of each sample against curve c at the
// two-sided confidence conf; nothing is stored.
// A curve that could not be fitted quantifies nothing (KindConflict); a
// sample the engine refuses is KindInvalid at /samples/i/<field>. sample is
// called with every sample's index; it returns the responses and dilution
// of sample i and each receives its prediction.
func Predict(c *Curve, conf float64, n int, sample func(i int) ([]float64, float64), each func(i int, p calib.Prediction)) error {
	r := c.Report
	if len(r.Coefficients) == 0 {
		return Errorf(KindConflict, "curve %s could not be fitted (see its checks), so it cannot quantify samples", c.ID)
	}
	for i := range n {
		responses, d := sample(i)
		pr, err := r.Predict(responses, d, conf)
		if err != nil {
			var ie *calib.InputError
			if errors.As(err, &ie) {
				return FieldError(Pointer("samples", i, ie.Field), "%s", ie.Reason)
			}
			return fmt.Errorf("lab: predict sample %d: %w", i, err)
		}
		each(i, pr)
	}
	return nil
}
