package calib

import (
	"math"
	"strconv"
)

// CRMResult is one result on a certified reference material (or an
// assigned value from proficiency testing): the lab's mean, the reference
// value and the reference value's standard uncertainty u(Cref).
type CRMResult struct {
	Measured, Reference, RefStdUncertainty float64
}

// TopDownInput holds a laboratory's own QC history for a top-down estimate.
type TopDownInput struct {
	// QCRecoveries are results of one control sample or check standard
	// divided by its nominal value (1.00 = 100 %), over a long period, in
	// the laboratory's usual conditions (different days, analysts, curves).
	QCRecoveries []float64
	// CRM are the bias results, at least one.
	CRM []CRMResult
}

// TopDown is a relative standard uncertainty estimated from within-lab
// reproducibility and bias (ISO 11352; Nordtest TR 537). Every figure is
// relative to the result (0.05 = 5 %).
type TopDown struct {
	URw      float64 // u(Rw): SD of the QC recoveries (n − 1)
	RMSBias  float64 // √(Σ b_i²/n_CRM), b_i = (measured − reference)/reference
	URef     float64 // mean of u(Cref)/Cref over the CRM results
	UBias    float64 // √(RMSBias² + URef²)
	Combined float64 // u_c = √(u(Rw)² + u(bias)²)
	Expanded float64 // U = 2·u_c (k = 2)
	// QCCount and CRMCount are the numbers of values used.
	QCCount, CRMCount int
	Cautions          []string
}

// ComputeTopDown estimates the relative standard uncertainty of a routine
// result from the lab's QC data (Nordtest TR 537; ISO 11352):
//
//	u(Rw) = SD of the QC recoveries
//	u(bias) = √(RMS_bias² + u(Cref)²), RMS_bias = √(Σ b_i²/n), b_i relative
//	u_c = √(u(Rw)² + u(bias)²),  U = 2·u_c
//
// u(Cref) is the mean relative standard uncertainty of the reference values.
// Preconditions: at least two finite QC recoveries, at least one CRM result
// with a non-zero finite reference value and a finite u(Cref) ≥ 0.
func ComputeTopDown(in TopDownInput) (TopDown, error) {
	_, sd, err := checkedMeanSD("qc_recoveries", in.QCRecoveries)
	if err != nil {
		return TopDown{}, err
	}
	if len(in.CRM) == 0 {
		return TopDown{}, inputErr("crm", "need at least one reference material result for the bias")
	}
	var sb2, sref float64
	for i, c := range in.CRM {
		f := "crm[" + strconv.Itoa(i) + "]"
		for _, v := range []float64{c.Measured, c.Reference, c.RefStdUncertainty} {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return TopDown{}, inputErr(f, "not a finite number")
			}
		}
		if c.Reference == 0 {
			return TopDown{}, inputErr(f+".reference", "reference value is zero: no relative bias")
		}
		if c.RefStdUncertainty < 0 {
			return TopDown{}, inputErr(f+".ref_std_uncertainty", "must be ≥ 0")
		}
		b := (c.Measured - c.Reference) / c.Reference
		sb2 += b * b
		sref += c.RefStdUncertainty / math.Abs(c.Reference)
	}
	n := float64(len(in.CRM))
	td := TopDown{URw: sd, RMSBias: math.Sqrt(sb2 / n), URef: sref / n,
		QCCount: len(in.QCRecoveries), CRMCount: len(in.CRM), Cautions: Cautions()}
	td.UBias = math.Hypot(td.RMSBias, td.URef)
	td.Combined = math.Hypot(td.URw, td.UBias)
	td.Expanded = 2 * td.Combined
	return td, nil
}
