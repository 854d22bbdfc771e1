package api

import (
	"context"
	"net/http"
	"slices"

	"curvekeeper/api/oapi"
	"curvekeeper/calib"
	"curvekeeper/lab"
)

// CreateMethod stores a method, or a new revision of it when it changed.
func (s *Server) CreateMethod(ctx context.Context, req oapi.CreateMethodRequestObject) (oapi.CreateMethodResponseObject, error) {
	p := mustPrincipal(ctx)
	b := req.Body
	in := lab.MethodInput{
		Name:        string(b.Name),
		Model:       calib.Model(b.Model),
		Weighting:   calib.Weighting(b.Weighting),
		Confidence:  0.95,
		Acceptance:  policyFrom(b.Acceptance),
		Description: deref(b.Description),
		QC:          qcFrom(b),
	}
	if b.ExpiredStandards != nil {
		in.Standards.ExpiredAdvisory = *b.ExpiredStandards == oapi.MethodRequestExpiredStandardsAdvisory
	}
	if o := b.WeightingOptions; o != nil {
		if o.MinReplicates != nil {
			in.Weights.MinReplicates = *o.MinReplicates
		}
		if o.LimitSigma != nil {
			in.Weights.LimitSigma = calib.SigmaBasis(*o.LimitSigma)
		}
	}
	if b.Confidence != nil {
		in.Confidence = float64(*b.Confidence)
	}
	if c := b.CurveParameters; c != nil {
		in.Curve = calib.CurveParameters{Start: coefficientsFrom(c.Start), Fixed: coefficientsFrom(c.Fixed)}
	}
	seen := map[string]bool{}
	for i, a := range b.Analytes {
		if seen[string(a.Name)] {
			return nil, lab.FieldError(lab.Pointer("analytes", i, "name"), "analyte %q is listed twice", a.Name)
		}
		seen[string(a.Name)] = true
		an := lab.Analyte{Name: string(a.Name), Unit: string(a.Unit), Quant: quantFrom(a.Quant)}
		if a.Model != nil {
			an.Model = calib.Model(*a.Model)
		}
		if a.Uncertainty != nil {
			an.Uncertainty = viaJSON[lab.UncertaintySpec](a.Uncertainty)
		}
		in.Analytes = append(in.Analytes, an)
	}
	m, created, err := s.lab.DefineMethod(ctx, p, in)
	if err != nil {
		return nil, err
	}
	if !created {
		return oapi.CreateMethod200JSONResponse(methodOut(m)), nil
	}
	return oapi.CreateMethod201JSONResponse{Body: methodOut(m),
		Headers: oapi.CreateMethod201ResponseHeaders{Location: "/v1/methods/" + m.Name}}, nil
}

// ListMethods lists the latest revision of every method.
func (s *Server) ListMethods(ctx context.Context, _ oapi.ListMethodsRequestObject) (oapi.ListMethodsResponseObject, error) {
	ms, err := s.lab.ListMethods(ctx)
	if err != nil {
		return nil, err
	}
	out := oapi.ListMethods200JSONResponse{Methods: make([]oapi.Method, 0, len(ms))}
	for i := range ms {
		out.Methods = append(out.Methods, methodOut(&ms[i]))
	}
	return out, nil
}

// GetMethod returns a method's latest revision, or the one asked for.
func (s *Server) GetMethod(ctx context.Context, req oapi.GetMethodRequestObject) (oapi.GetMethodResponseObject, error) {
	var (
		m   *lab.Method
		err error
	)
	if req.Params.Revision != nil {
		m, err = s.lab.GetMethodRevision(ctx, req.Name, *req.Params.Revision)
	} else {
		m, err = s.lab.GetMethod(ctx, req.Name)
	}
	if err != nil {
		return nil, err
	}
	return oapi.GetMethod200JSONResponse(methodOut(m)), nil
}

// policyFrom fills every threshold the request leaves out from the engine's
// defaults.
func policyFrom(a *oapi.AcceptanceInput) calib.Policy {
	p := calib.DefaultPolicy()
	if a == nil {
		return p
	}
	setF := func(dst *float64, src *float64) {
		if src != nil {
			*dst = *src
		}
	}
	setA := func(dst *float64, src *oapi.Alpha) {
		if src != nil {
			*dst = float64(*src)
		}
	}
	setF(&p.BackCalcLowTolerancePct, a.BackCalcLowTolerancePct)
	setF(&p.BackCalcTolerancePct, a.BackCalcTolerancePct)
	setF(&p.BackCalcMinPassFraction, a.BackCalcMinPassFraction)
	setF(&p.MaxRSEPct, a.MaxRsePct)
	setF(&p.MaxRFRSDPct, a.MaxRfRsdPct)
	setF(&p.MinRSquared, a.MinRSquared)
	setF(&p.OutlierCooksD, a.OutlierCooksD)
	setF(&p.OutlierStudentized, a.OutlierStudentized)
	setA(&p.HomoscedasticityAlpha, a.HomoscedasticityAlpha)
	setA(&p.InterceptAlpha, a.InterceptAlpha)
	setA(&p.LackOfFitAlpha, a.LackOfFitAlpha)
	setA(&p.MandelAlpha, a.MandelAlpha)
	setA(&p.RunsAlpha, a.RunsAlpha)
	if a.MinLevels != nil {
		p.MinLevels = *a.MinLevels
	}
	if a.Mandatory != nil {
		p.Mandatory = make([]string, 0, len(*a.Mandatory))
		for _, c := range *a.Mandatory {
			p.Mandatory = append(p.Mandatory, string(c))
		}
	}
	return p
}

// qcFrom reads the method's QC settings; zero values take the store's
// defaults (verification tolerance ±20 %, US EPA SW-846 Method 8000D).
func qcFrom(b *oapi.MethodRequest) lab.QCPolicy {
	var q lab.QCPolicy
	if b.Acceptance != nil && b.Acceptance.VerificationTolerancePct != nil {
		q.VerificationTolerancePct = *b.Acceptance.VerificationTolerancePct
	}
	if b.PendingCurvesInForce != nil {
		q.PendingCurvesInForce = *b.PendingCurvesInForce
	}
	if b.MaxCurveAgeHours != nil {
		q.MaxCurveAgeHours = *b.MaxCurveAgeHours
	}
	q.AllowSelfReview = b.AllowSelfReview != nil && *b.AllowSelfReview
	if b.Signatures != nil {
		q.Signatures = string(*b.Signatures)
	}
	return q
}

func methodOut(m *lab.Method) oapi.Method {
	pol := m.Acceptance
	mandatory := make([]oapi.CheckName, 0, len(pol.Mandatory))
	for _, c := range pol.Mandatory {
		mandatory = append(mandatory, oapi.CheckName(c))
	}
	out := oapi.Method{
		Name:      m.Name,
		Revision:  m.Revision,
		Model:     oapi.Model(m.Model),
		Weighting: oapi.Weighting(m.Weighting),
		WeightingOptions: oapi.WeightingOptions{MinReplicates: m.Weights.MinReplicates,
			LimitSigma: oapi.SigmaBasis(m.Weights.LimitSigma)},
		CurveParameters: curveParametersOut(m.Curve),
		Confidence:      m.Confidence,
		CreatedAt:       oapi.NewTimestamp(m.CreatedAt),
		Actor:           m.CreatedBy,
		Description:     m.Description,
		Analytes:        make([]oapi.Analyte, 0, len(m.Analytes)),
		Acceptance: oapi.AcceptancePolicy{
			BackCalcLowTolerancePct:  pol.BackCalcLowTolerancePct,
			BackCalcMinPassFraction:  pol.BackCalcMinPassFraction,
			BackCalcTolerancePct:     pol.BackCalcTolerancePct,
			HomoscedasticityAlpha:    pol.HomoscedasticityAlpha,
			InterceptAlpha:           pol.InterceptAlpha,
			LackOfFitAlpha:           pol.LackOfFitAlpha,
			Mandatory:                mandatory,
			MandelAlpha:              pol.MandelAlpha,
			MaxRsePct:                pol.MaxRSEPct,
			MaxRfRsdPct:              pol.RFRSDLimit(),
			MinLevels:                pol.MinLevels,
			MinRSquared:              pol.MinRSquared,
			OutlierCooksD:            pol.OutlierCooksD,
			OutlierStudentized:       pol.OutlierStudentized,
			RunsAlpha:                pol.RunsAlpha,
			VerificationTolerancePct: m.QC.VerificationTolerancePct,
		},
		PendingCurvesInForce: m.QC.PendingCurvesInForce,
	}
	if m.QC.AllowSelfReview {
		out.AllowSelfReview = &m.QC.AllowSelfReview
	}
	if m.QC.Signatures != "" {
		sig := oapi.MethodSignatures(m.QC.Signatures)
		out.Signatures = &sig
	}
	if m.QC.MaxCurveAgeHours > 0 {
		h := m.QC.MaxCurveAgeHours
		out.MaxCurveAgeHours = &h
	}
	if m.Standards.ExpiredAdvisory {
		adv := oapi.MethodExpiredStandardsAdvisory
		out.ExpiredStandards = &adv
	}
	for _, a := range m.Analytes {
		oa := oapi.Analyte{Name: oapi.Identifier(a.Name), Unit: oapi.Unit(a.Unit), Quant: quantOut(a)}
		if a.Model != "" {
			mo := oapi.Model(a.Model)
			oa.Model = &mo
		}
		if a.Uncertainty != nil {
			oa.Uncertainty = viaJSON[oapi.UncertaintySpec](a.Uncertainty)
		}
		out.Analytes = append(out.Analytes, oa)
	}
	return out
}

// CreateToken issues a token; its secret is in this response only.
func (s *Server) CreateToken(ctx context.Context, req oapi.CreateTokenRequestObject) (oapi.CreateTokenResponseObject, error) {
	p := mustPrincipal(ctx)
	scopes := make([]string, 0, len(req.Body.Scopes))
	for _, sc := range req.Body.Scopes {
		if !slices.Contains(scopes, string(sc)) {
			scopes = append(scopes, string(sc))
		}
	}
	in := lab.TokenInput{Name: string(req.Body.Name), Scopes: scopes, AllowDualRole: req.Body.AllowDualRole != nil && *req.Body.AllowDualRole,
		Owner: deref(req.Body.Owner)}
	if req.Body.Instruments != nil {
		in.Instruments = make([]string, 0, len(*req.Body.Instruments))
		for _, name := range *req.Body.Instruments {
			in.Instruments = append(in.Instruments, string(name))
		}
	}
	id, secret, err := s.lab.IssueToken(ctx, p, in)
	if err != nil {
		return nil, err
	}
	out := oapi.CreateToken201JSONResponse{ID: uuidOf(id), Name: string(req.Body.Name), Token: secret,
		CreatedAt: oapi.NewTimestamp(s.lab.Now())}
	if in.Instruments != nil {
		out.Instruments = &in.Instruments
	}
	for _, sc := range scopes {
		out.Scopes = append(out.Scopes, oapi.Scope(sc))
	}
	return out, nil
}

// DeleteToken revokes a token; the next request with it is refused.
func (s *Server) DeleteToken(ctx context.Context, req oapi.DeleteTokenRequestObject) (oapi.DeleteTokenResponseObject, error) {
	p := mustPrincipal(ctx)
	if err := s.lab.RevokeToken(ctx, p, req.ID.String()); err != nil {
		return nil, err
	}
	return oapi.DeleteToken204Response{}, nil
}

// mustPrincipal returns the authenticated caller; authMiddleware guarantees
// one on every /v1 route.
func mustPrincipal(ctx context.Context) lab.Principal {
	p, ok := principalFrom(ctx)
	if !ok {
		panic(newProblem(http.StatusUnauthorized, "no principal on an authenticated route"))
	}
	return p
}

// curveParametersOut is a method's curve parameters, empty objects when it
// names none.
func curveParametersOut(c calib.CurveParameters) oapi.CurveParameters {
	return oapi.CurveParameters{Start: coefficientsOut(c.Start), Fixed: coefficientsOut(c.Fixed)}
}

// coefficientFields are the named coefficients of oapi.CurveCoefficients.
func coefficientFields(c *oapi.CurveCoefficients) map[string]**float64 {
	return map[string]**float64{"a": &c.A, "b": &c.B, "c": &c.C, "d": &c.D, "g": &c.G, "y0": &c.Y0}
}

// coefficientsFrom is the map of the coefficients c names (nil for none).
func coefficientsFrom(c *oapi.CurveCoefficients) map[string]float64 {
	if c == nil {
		return nil
	}
	var out map[string]float64
	for name, f := range coefficientFields(c) {
		if *f != nil {
			if out == nil {
				out = map[string]float64{}
			}
			out[name] = **f
		}
	}
	return out
}

// coefficientsOut is coefficientsFrom's inverse (an empty object for none).
func coefficientsOut(m map[string]float64) *oapi.CurveCoefficients {
	var c oapi.CurveCoefficients
	for name, f := range coefficientFields(&c) {
		if v, ok := m[name]; ok {
			*f = &v
		}
	}
	return &c
}
