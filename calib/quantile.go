package calib

import (
	"math"
	"sync"

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
// sync.Map suits a read-mostly cache shared by concurrent requests.
var quantiles sync.Map // quantileKey → float64

// studentT returns t(p; df), the p-quantile of Student's t with df degrees of
// freedom.
//
// Precondition: 0 < p < 1, df ≥ 1. gonum's StudentsT needs Sigma: 1, or its
// Quantile returns 0 (FIELD-NOTES §1).
func studentT(p float64, df int) float64 {
	k := quantileKey{kind: 't', p: p, d1: df}
	if v, ok := quantiles.Load(k); ok {
		return v.(float64)
	}
	q := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(df)}.Quantile(p)
	if math.IsNaN(q) || math.IsInf(q, 0) {
		q = 0
	}
	quantiles.Store(k, q)
	return q
}

// fQuantile returns F(p; d1, d2), the p-quantile of Fisher's F distribution.
//
// Precondition: 0 < p < 1, d1, d2 ≥ 1.
func fQuantile(p float64, d1, d2 int) float64 {
	k := quantileKey{kind: 'f', p: p, d1: d1, d2: d2}
	if v, ok := quantiles.Load(k); ok {
		return v.(float64)
	}
	q := distuv.F{D1: float64(d1), D2: float64(d2)}.Quantile(p)
	if math.IsNaN(q) || math.IsInf(q, 0) {
		q = 0
	}
	quantiles.Store(k, q)
	return q
}
