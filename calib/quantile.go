package calib

import (
	"math"

	"gonum.org/v1/gonum/stat/distuv"
)

// quantileKey identifies one cached quantile: the distribution, the
// probability and the degrees of freedom.
type quantileKey struct {
	kind byte // 't' or 'f'
	p    float64
	d1   int
	d2   int
}

// quantiles caches Student t and F quantiles by (p, df). The inverse
// incomplete beta function behind both costs microseconds, far more than a
// whole calibration fit, and the same few (p, df) pairs recur in every run.
var quantiles = newSetCache[quantileKey, float64](64)

// cachedQuantile returns the quantile of k, computing it with compute on a
// miss.
func cachedQuantile(k quantileKey, compute func() float64) float64 {
	h := math.Float64bits(k.p) ^ uint64(k.kind)<<56 ^ uint64(k.d1)*0x100000001b3 ^ uint64(k.d2)*0xc2b2ae3d27d4eb4f
	return quantiles.get(h, k, compute)
}

// studentT returns t(p; df), the p-quantile of Student's t with df degrees of
// freedom.
//
// Precondition: 0 < p < 1, df ≥ 1. gonum's StudentsT needs Sigma: 1, or its
// Quantile returns 0 (FIELD-NOTES §1).
func studentT(p float64, df int) float64 {
	return cachedQuantile(quantileKey{kind: 't', p: p, d1: df}, func() float64 {
		q := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(df)}.Quantile(p)
		if math.IsNaN(q) || math.IsInf(q, 0) {
			q = 0
		}
		return q
	})
}

// fQuantile returns F(p; d1, d2), the p-quantile of Fisher's F distribution.
//
// Precondition: 0 < p < 1, d1, d2 ≥ 1.
func fQuantile(p float64, d1, d2 int) float64 {
	return cachedQuantile(quantileKey{kind: 'f', p: p, d1: d1, d2: d2}, func() float64 {
		q := distuv.F{D1: float64(d1), D2: float64(d2)}.Quantile(p)
		if math.IsNaN(q) || math.IsInf(q, 0) {
			q = 0
		}
		return q
	})
}
