package api

import (
	"curvekeeper/api/oapi"
	"curvekeeper/calib"
	"curvekeeper/lab"
)

// curveOut renders a stored curve in the contract's shape. Numbers that do
// not exist (no fit, a check not computed) are null, never 0 or NaN.
func curveOut(c *lab.Curve) oapi.Curve {
	r := c.Report
	fitted := len(r.Coefficients) > 0
	out := oapi.Curve{
		ID:                 uuidOf(c.ID),
		RunID:              uuidOf(c.RunID),
		Method:             c.Method,
		MethodRevision:     c.MethodRevision,
		Instrument:         c.Instrument,
		Analyte:            c.Analyte,
		Unit:               c.Unit,
		Model:              oapi.Model(r.Model),
		Weighting:          oapi.Weighting(r.Weighting),
		WeightingRequested: oapi.Weighting(r.WeightingRequested),
		WeightConvention:   r.WeightConvention,
		ZeroHandling:       r.ZeroHandling,
		Nonlinear:          nonlinearOut(r.Curve),
		ResponseFactors:    responseFactorsOut(r.RF),
		Coefficients:       nonNil(r.Coefficients),
		StandardErrors:     nonNil(r.StandardErrors),
		Covariance:         make([][]float64, 0, len(r.Covariance)),
		Df:                 r.DF,
		N:                  r.N,
		Levels:             r.Levels,
		Confidence:         r.Confidence,
		Verdict:            oapi.Verdict(r.Verdict),
		Status:             oapi.CurveStatus(c.Status),
		EngineVersion:      r.Engine,
		Cautions:           calib.Cautions(),
		AcquiredAt:         oapi.NewTimestamp(c.AcquiredAt),
		CreatedAt:          oapi.NewTimestamp(c.CreatedAt),
		Points:             make([]oapi.CurvePoint, 0, len(r.Points)),
		Checks:             make([]oapi.Check, 0, len(r.Checks)),
		WeightCandidates:   make([]oapi.WeightCandidate, 0, len(r.WeightCandidates)),
		Flags:              make([]oapi.FitFlag, 0, len(r.Flags)),
	}
	for _, f := range r.Flags {
		out.Flags = append(out.Flags, oapi.FitFlag(f))
	}
	if r.WeightingAdvised != "" {
		adv := oapi.Weighting(r.WeightingAdvised)
		out.WeightingAdvised = &adv
	}
	if fitted && r.HeaviestLevel.Share > 0 {
		out.HeaviestLevel = &oapi.LevelShare{Concentration: r.HeaviestLevel.X, Share: r.HeaviestLevel.Share}
	}
	if len(r.Cautions) > 0 {
		out.Cautions = r.Cautions
	}
	for _, row := range r.Covariance {
		out.Covariance = append(out.Covariance, nonNil(row))
	}
	if fitted {
		out.ResidualSd = num(r.ResidualSD)
		out.RSquared = num(r.RSquared)
	}
	for _, pt := range r.Points {
		op := oapi.CurvePoint{Level: pt.Level, Concentration: pt.X, Response: pt.Y, Excluded: pt.Excluded}
		if fitted {
			op.Weight = num(pt.Weight)
			op.Fitted = num(pt.Fitted)
			op.Residual = num(pt.Residual)
			if !pt.Excluded {
				op.Leverage = num(pt.Leverage)
				op.StudentizedResidual = num(pt.Studentized)
				op.CooksDistance = num(pt.CooksDistance)
			}
			if pt.HasBackCalc {
				op.BackCalculated = num(pt.BackCalculated)
				if pt.HasRelativeError {
					op.RelativeErrorPct = num(pt.RelativeErrorPct)
				}
			}
		}
		out.Points = append(out.Points, op)
	}
	for _, ch := range r.Checks {
		oc := oapi.Check{Name: oapi.CheckName(ch.Name), Passed: ch.Passed, Computed: ch.Computed,
			Mandatory: ch.Mandatory, Source: ch.Source, Detail: ch.Detail}
		if ch.Computed {
			oc.Statistic = num(ch.Statistic)
			oc.Limit = num(ch.Limit)
		}
		out.Checks = append(out.Checks, oc)
	}
	if r.Limits.Computed {
		out.Limits = oapi.Limits{Lod: num(r.Limits.LOD), Loq: num(r.Limits.LOQ),
			CriticalValue: num(r.Limits.CriticalValue), CriticalConcentration: num(r.Limits.CriticalConc),
			DetectionLimit: num(r.Limits.DetectionLimit), Detail: r.Limits.Detail}
		if r.Limits.SigmaBasis != "" {
			basis := oapi.SigmaBasis(r.Limits.SigmaBasis)
			out.Limits.SigmaBasis, out.Limits.Sigma = &basis, num(r.Limits.Sigma)
		}
	} else {
		out.Limits = oapi.Limits{Detail: r.Limits.Detail}
	}
	if len(r.Points) > 0 {
		out.Range = oapi.Range{Low: num(r.Range.Low), High: num(r.Range.High)}
	}
	for _, wc := range r.WeightCandidates {
		o := oapi.WeightCandidate{Weighting: oapi.Weighting(wc.Weighting), Chosen: wc.Chosen, Advised: wc.Advised, Note: wc.Note}
		// calib/1.0.0 reports carry no Scored: a candidate without a note was scored.
		if wc.Scored || (r.Engine == "calib/1.0.0" && (wc.Note == "" || wc.Chosen)) {
			o.SumAbsRe = num(wc.SumAbsRE)
		}
		if wc.Scored {
			o.MaxLevelWeightShare = num(wc.MaxLevelShare)
		}
		out.WeightCandidates = append(out.WeightCandidates, o)
	}
	if r.Variance.Kind != "" {
		out.VarianceModel = &oapi.VarianceModel{Kind: r.Variance.Kind, C0: r.Variance.C0, C1: r.Variance.C1}
	}
	if c.RevisionOf != "" {
		rev := uuidOf(c.RevisionOf)
		out.RevisionOf = &rev
	}
	if c.Review != nil {
		rv := &oapi.Review{Actor: c.Review.Actor, At: oapi.NewTimestamp(c.Review.At), Decision: oapi.ReviewDecision(c.Review.Decision)}
		if c.Review.Reason != "" {
			reason := c.Review.Reason
			rv.Reason = &reason
		}
		out.Review = rv
	}
	return out
}

func summaryOut(c *lab.CurveSummary, failed []string) oapi.CurveSummary {
	return oapi.CurveSummary{
		ID: uuidOf(c.ID), RunID: uuidOf(c.RunID), Method: c.Method, MethodRevision: c.MethodRevision,
		Instrument: c.Instrument, Analyte: c.Analyte, Unit: c.Unit, Model: oapi.Model(c.Model),
		Weighting: oapi.Weighting(c.Weighting), Verdict: oapi.Verdict(c.Verdict), Status: oapi.CurveStatus(c.Status),
		AcquiredAt: oapi.NewTimestamp(c.AcquiredAt), CreatedAt: oapi.NewTimestamp(c.CreatedAt), RSquared: c.RSquared, FailedChecks: nonNilS(failed),
	}
}

func nonNil(v []float64) []float64 {
	if v == nil {
		return []float64{}
	}
	return v
}

// enums converts flags to the spec's enum type E, never nil.
func enums[E ~string](v []string) []E {
	out := make([]E, len(v))
	for i, s := range v {
		out[i] = E(s)
	}
	return out
}

func nonNilS(v []string) []string {
	if v == nil {
		return []string{}
	}
	return v
}

// responseFactorsOut is the part of a curve only the average RF model has.
func responseFactorsOut(rf *calib.RFDetails) *oapi.CurveResponseFactors {
	if rf == nil {
		return nil
	}
	return &oapi.CurveResponseFactors{Rfs: nonNil(rf.RFs), Levels: nonNilS(rf.Levels), Mean: rf.Mean, Sd: rf.SD,
		RsdPct: rf.RSDPct, K: rf.K, MaxRsdPct: rf.MaxRSDPct, Blanks: rf.Blanks, Basis: rf.Basis, Source: rf.Source}
}

// nonlinearOut is the part of a curve only non-linear models have.
func nonlinearOut(cd *calib.CurveDetails) *oapi.CurveNonlinear {
	if cd == nil {
		return nil
	}
	out := &oapi.CurveNonlinear{ParameterNames: nonNilS(cd.ParameterNames), Outcome: oapi.CurveNonlinearOutcome(cd.Outcome),
		Criterion: cd.Criterion, Iterations: cd.Iterations, Theta: cd.Theta, ThetaMethod: cd.ThetaMethod,
		Anchors: nonNilS(cd.Anchors), LogX: cd.LogX, ProfileLimitPct: cd.ProfileLimitPct,
		Profile: make([]oapi.ProfilePoint, len(cd.Profile))}
	if cd.Fixed != nil {
		out.Fixed = &cd.Fixed
	}
	if cd.Start != nil {
		out.Start = &cd.Start
	}
	for i, p := range cd.Profile {
		out.Profile[i].X = p.X
		if p.OK {
			out.Profile[i].CvPct = num(p.CVPct)
		}
	}
	if cd.HasWorkingRange {
		out.WorkingRange = &oapi.Range{Low: num(cd.WorkingRange.Low), High: num(cd.WorkingRange.High)}
	}
	return out
}
