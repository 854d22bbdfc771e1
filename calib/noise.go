package calib

import "math"

// roundingTol is the relative size of floating-point rounding in a fit's
// residuals: responses stored as doubles carry a relative error of about
// 1.1e-16 each, and the solve and the residuals add a small multiple of it;
// 1e-13 leaves a margin of some hundreds over that and lies far below the
// noise of any instrument (a few digits). Every check and diagnostic reads
// residuals against the floor it gives (see roundingFloor); it is the one
// definition of "rounding noise" in the package.
const roundingTol = 1e-13

// noise describes the rounding level of one fit's residuals.
type noise struct {
	floor float64 // residuals with |e| ≤ floor are rounding noise
	exact bool    // every residual is rounding noise: an exact fit
}

// roundingFloor returns the absolute size below which a residual of the fit
// of model m with coefficients beta to d is floating-point rounding:
// roundingTol·max over the readings of (|yᵢ| + Σⱼ|βⱼ·xᵢ^j|). The terms of
// the curve are counted as well as the response, because rounding follows
// the size of the numbers summed, which exceeds |y| where terms cancel.
func roundingFloor(d *dataset, m Model, beta []float64) float64 {
	scale := 0.0
	var v [3]float64
	p := nParams(m)
	for i, x := range d.x {
		basis(m, x, v[:])
		s := math.Abs(d.y[i])
		for j := 0; j < p; j++ {
			s += math.Abs(beta[j] * v[j])
		}
		scale = max(scale, s)
	}
	return roundingTol * scale
}

// fitNoise returns the rounding floor of the fit f and whether it is exact:
// its weighted mean square residual Σw e²/Σw (Σw = n) is at most floor²,
// i.e. the residuals are, on the whole, at the level of rounding.
func fitNoise(d *dataset, m Model, f lsq) noise {
	fl := roundingFloor(d, m, f.beta)
	return noise{floor: fl, exact: withinRounding(f.ssr, len(d.x), fl)}
}

// withinRounding reports whether a weighted residual sum of squares ssr of
// n values (weights on the Σw = n scale) is at the level of rounding.
func withinRounding(ssr float64, n int, floor float64) bool {
	return ssr <= float64(n)*floor*floor
}

// exactFitText is what the texts of the checks say of an exact fit.
const exactFitText = "Exact fit: the residuals are at the level of floating-point rounding of the responses"
