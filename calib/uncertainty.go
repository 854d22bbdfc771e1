package calib

import (
	"math"
	"strconv"

	"gonum.org/v1/gonum/stat/distuv"
)

// Distribution is the probability distribution assigned to an input
// quantity (JCGM 100 §4.3, JCGM 101 §6.4). It decides how the standard
// uncertainty was obtained and how Monte Carlo draws the input.
type Distribution string

const (
	// DistNormal: u = U/k from a certificate (JCGM 100 §4.3.3), or any
	// standard uncertainty taken as Gaussian. Monte Carlo draws N(x, u²).
	DistNormal Distribution = "normal"
	// DistRectangular: a tolerance ±a with no better knowledge, u = a/√3
	// (JCGM 100 §4.3.7; Eurachem/CITAC QUAM App. E). Monte Carlo draws
	// uniformly on [x − a, x + a].
	DistRectangular Distribution = "rectangular"
	// DistTypeA: the mean of n readings, u = s/√n, ν = n − 1 (JCGM 100
	// §4.2). Monte Carlo draws x + u·t_ν, the scaled and shifted t
	// distribution of JCGM 101 §6.4.9.
	DistTypeA Distribution = "type_a"
)

// Source says what an uncertainty term stands for in a laboratory result.
type Source string

const (
	SourceCalibration   Source = "calibration"   // s(x̂0) of inverse prediction from the curve
	SourceStandard      Source = "standard"      // certificate of a reference material or stock
	SourcePreparation   Source = "preparation"   // volumes, masses, dilution steps
	SourceRepeatability Source = "repeatability" // scatter of the sample's own readings or preparations
	SourceRecovery      Source = "recovery"      // method recovery (spikes, CRM)
	SourceOther         Source = "other"
)

// BudgetModel is the measurement model y = f(x₁, …, x_N) of a budget.
type BudgetModel string

const (
	// ModelSum: y = Constant + Σ c_i·x_i, c_i the terms' Sensitivity. The
	// law of propagation u_c² = Σ c_i²u_i² (JCGM 100 eq. 10) is exact here.
	ModelSum BudgetModel = "sum"
	// ModelProduct: y = Constant·Π x_i^p_i, p_i the terms' Exponent (1 for a
	// factor, −1 for a divisor). Relative uncertainties combine:
	// u_c/|y| = √Σ(p_i·u_i/x_i)² (JCGM 100 §5.1.6; QUAM §8.2.6), so the
	// sensitivity coefficient is c_i = p_i·y/x_i.
	ModelProduct BudgetModel = "product"
)

// Coverage selects the coverage factor k of U = k·u_c.
type Coverage string

const (
	// CoverageStudentT: k = t((1+p)/2; ν_eff), ν_eff by Welch–Satterthwaite
	// truncated to the next lower integer (JCGM 100 §G.4.1, G.4.2); the
	// normal quantile when ν_eff is infinite. The default.
	CoverageStudentT Coverage = "student_t"
	// CoverageK2: k = 2 whatever ν_eff (JCGM 100 §6.3.3, common practice
	// for a level of confidence of about 95 %).
	CoverageK2 Coverage = "k2"
)

// UncertaintyTerm is one input quantity x_i of a budget with its standard
// uncertainty u(x_i).
type UncertaintyTerm struct {
	Name   string
	Source Source
	Kind   Distribution // "" means DistNormal
	Value  float64      // the estimate x_i
	// StdUncertainty is u(x_i), in the units of Value (not relative).
	StdUncertainty float64
	// Sensitivity is c_i = ∂f/∂x_i of ModelSum; 0 means 1. Unused by
	// ModelProduct, which derives c_i from Exponent.
	Sensitivity float64
	// Exponent is p_i of ModelProduct; 0 means 1. Unused by ModelSum.
	Exponent float64
	// DF is the degrees of freedom ν_i: 0 or +Inf means infinite (a
	// certificate, a tolerance), else at least 1.
	DF float64
	// Group names a correlation group: terms with the same non-empty Group
	// stand for one quantity (a shared stock solution, one pipette used
	// twice) and are combined as fully correlated, r = +1 (JCGM 100 §5.2.2
	// note 1): u_g = Σ_{i∈g} c_i·u_i. They must share Kind and DF.
	Group string
	// Curve carries what Monte Carlo needs to simulate x̂0 = (ȳ0 − b0)/b1
	// for a calibration term of a linear curve; nil for every other term.
	Curve *CurveDraw
}

// CurveDraw describes the calibration term of a straight-line curve for
// Monte Carlo: x̂0 = Dilution·(ȳ0 − b0)/b1 with (b0, b1) drawn from the
// bivariate normal N(β, Cov(β)) of the fit and ȳ0 from N(ȳ0, s²/(m·w0)).
// With DF = ν > 0 the three deviations are scaled together by √(ν/χ²_ν):
// (b0, b1, ȳ0) then follow the multivariate t with ν degrees of freedom
// that JCGM 101 §6.4.9 and §6.5.3 assign when the covariance rests on one
// estimated s(y/x) (from memory), which is what the GUM's t(ν) coverage
// factor assumes too; DF = 0 keeps the plain normals.
type CurveDraw struct {
	DF         float64 // ν = n − p of the fit; 0: bivariate normal
	B0, B1     float64
	Cov        [2][2]float64 // Cov(b0, b1) = s²(XᵀWX)⁻¹; zero row and column 0 for a line through the origin
	MeanY      float64       // ȳ0, the mean response of the unknown
	SDMeanY    float64       // s/√(m·w0)
	Dilution   float64       // 0 means 1
	Readings   int           // m
	ResidualSD float64       // s(y/x)
	// Model, Params and ParamCov, set for a non-linear curve (4PL, 5PL,
	// power, exponential) in place of B0, B1 and Cov: Monte Carlo then
	// draws the coefficients β from N(β̂, Cov(β̂)) (fixed coefficients have
	// zero rows) and ȳ0 as above, scaled together to the multivariate t
	// when DF > 0, and inverts the drawn curve at the drawn ȳ0. A draw
	// whose ȳ0 lies beyond the drawn curve's asymptote has no
	// concentration and is counted in MCResult.Discarded.
	Model    Model
	Params   []float64
	ParamCov [][]float64
}

// BudgetInput is a measurement model with its input terms.
type BudgetInput struct {
	Model BudgetModel // "" means ModelProduct
	Terms []UncertaintyTerm
	// Constant: added (ModelSum) or multiplied (ModelProduct; 0 means 1).
	Constant float64
	Coverage Coverage // "" means CoverageStudentT
	Level    float64  // level of confidence for k and for Monte Carlo; 0 means 0.95
	// RoundUp rounds U up, not to nearest, to two significant figures
	// (JCGM 100 §7.2.6 allows either).
	RoundUp bool
}

// TermResult is one term's place in a computed budget.
type TermResult struct {
	UncertaintyTerm
	// Coefficient is the sensitivity coefficient c_i used (for ModelProduct
	// c_i = p_i·y/x_i).
	Coefficient float64
	// Contribution is u_i(y) = c_i·u(x_i), signed, in the units of y.
	Contribution float64
	// Relative is u(x_i)/|x_i|, NaN when x_i = 0.
	Relative float64
	// Share of u_c²: Contribution·u_g/u_c², u_g the sum of the
	// contributions of the term's correlation group (its own contribution
	// when it has none). Shares add to 1; a correlated term whose
	// contribution opposes its group's has a negative share.
	Share float64
}

// Budget is a combined and expanded standard uncertainty (JCGM 100).
type Budget struct {
	Model    BudgetModel
	Value    float64 // y = f(x̂₁, …, x̂_N)
	Combined float64 // u_c(y)
	// RelativeCombined is u_c/|y|; NaN when y = 0.
	RelativeCombined float64
	// EffectiveDF is ν_eff by Welch–Satterthwaite (JCGM 100 eq. G.2b), with
	// each correlation group one component; +Inf when every ν is infinite.
	EffectiveDF    float64
	Coverage       Coverage
	Level          float64
	CoverageFactor float64 // k
	// ExpandedExact is k·u_c before rounding.
	ExpandedExact float64
	// Expanded is U = k·u_c rounded to two significant figures, and
	// ValueRounded is y rounded to the same place (JCGM 100 §7.2.6);
	// Decimals is the number of digits after the point (0 when U ≥ 10) and
	// ExpandedText, ValueText their texts with exactly that many digits.
	// With U = 0 there is no place to round to: y is kept unrounded.
	Expanded     float64
	ValueRounded float64
	Decimals     int
	ExpandedText string
	ValueText    string
	Terms        []TermResult
	Cautions     []string
}

// NormalTerm returns a term with u = U/k, as from a certificate that states
// an expanded uncertainty U with coverage factor k (JCGM 100 §4.3.3), ν = ∞.
func NormalTerm(name string, src Source, value, expanded, k float64) UncertaintyTerm {
	return UncertaintyTerm{Name: name, Source: src, Kind: DistNormal, Value: value, StdUncertainty: expanded / k}
}

// RectangularTerm returns a term for a tolerance value ± a with u = a/√3
// (JCGM 100 §4.3.7; QUAM App. E.1), ν = ∞.
func RectangularTerm(name string, src Source, value, a float64) UncertaintyTerm {
	return UncertaintyTerm{Name: name, Source: src, Kind: DistRectangular, Value: value, StdUncertainty: a / math.Sqrt(3)}
}

// TypeATerm returns the mean x̄ of readings with u = s/√n and ν = n − 1
// (JCGM 100 §4.2.3). At least two readings, all finite.
func TypeATerm(name string, src Source, readings []float64) (UncertaintyTerm, error) {
	mean, sd, err := checkedMeanSD("readings", readings)
	if err != nil {
		return UncertaintyTerm{}, err
	}
	n := float64(len(readings))
	return UncertaintyTerm{Name: name, Source: src, Kind: DistTypeA, Value: mean,
		StdUncertainty: sd / math.Sqrt(n), DF: n - 1}, nil
}

// RepeatabilityFactor returns a factor of value 1 for a product model whose
// relative u is the relative standard deviation of the mean of the
// readings, (s/x̄)/√n, ν = n − 1 (QUAM §8.2.6 treats repeatability as such a
// factor). The calibration term already carries the scatter of the
// unknown's instrument readings through s(y/x)²/(m·w0); add this factor for
// what the curve does not see, such as replicate preparations.
func RepeatabilityFactor(name string, readings []float64) (UncertaintyTerm, error) {
	mean, sd, err := checkedMeanSD("readings", readings)
	if err != nil {
		return UncertaintyTerm{}, err
	}
	if mean == 0 {
		return UncertaintyTerm{}, inputErr("readings", "mean is zero: no relative standard deviation")
	}
	n := float64(len(readings))
	return UncertaintyTerm{Name: name, Source: SourceRepeatability, Kind: DistTypeA, Value: 1,
		StdUncertainty: math.Abs(sd/mean) / math.Sqrt(n), DF: n - 1}, nil
}

// RecoveryTerm returns the recovery R̄m with standard uncertainty u for a
// product model. When the result is corrected for recovery the term divides
// (Exponent −1, value R̄m); when it is not, the term is a factor 1 with the
// relative uncertainty u/R̄m (Eurachem/CITAC QUAM §7.3 and Example A4).
func RecoveryTerm(name string, recovery, u, df float64, corrected bool) UncertaintyTerm {
	if corrected {
		return UncertaintyTerm{Name: name, Source: SourceRecovery, Value: recovery, StdUncertainty: u, Exponent: -1, DF: df}
	}
	return UncertaintyTerm{Name: name, Source: SourceRecovery, Value: 1, StdUncertainty: u / recovery, DF: df}
}

// VolumeStep is one dilution or preparation step: an aliquot taken and the
// volume it is made up to, each with a tolerance ± (rectangular).
type VolumeStep struct {
	Aliquot, AliquotTol float64
	Final, FinalTol     float64
}

// DilutionTerms returns, for a product model, one term per volume of the
// steps: every final volume a factor, every aliquot a divisor, so the
// product of the terms is the dilution factor Π Final/Aliquot and each
// volume's relative uncertainty a/(√3·V) enters once (QUAM App. E.1).
// Volumes of one pipette or flask used twice may be put in one Group.
func DilutionTerms(name string, steps []VolumeStep) []UncertaintyTerm {
	out := make([]UncertaintyTerm, 0, 2*len(steps))
	for i, s := range steps {
		n := name + " step " + strconv.Itoa(i+1)
		f := RectangularTerm(n+" final volume", SourcePreparation, s.Final, s.FinalTol)
		a := RectangularTerm(n+" aliquot", SourcePreparation, s.Aliquot, s.AliquotTol)
		a.Exponent = -1
		out = append(out, f, a)
	}
	return out
}

// StandardTerms returns the terms that the calibration standards add to a
// result of a product model, when every standard was prepared from one
// certified stock: the certificate as a factor 1 with relative u =
// (U/k)/c_stock (normal, in correlation group "stock:"+name, so the same
// stock entering a budget twice, e.g. also as a spike, counts as one
// quantity), and each preparation volume as a factor 1 with relative u =
// a/(√3·V) (rectangular; QUAM App. E.1). The stock and the volumes do not
// multiply the result; their relative uncertainties do.
func StandardTerms(name string, stock, expanded, k float64, steps []VolumeStep) []UncertaintyTerm {
	cert := UncertaintyTerm{Name: name + " certificate", Source: SourceStandard, Kind: DistNormal, Value: 1,
		StdUncertainty: expanded / k / math.Abs(stock), Group: "stock:" + name}
	out := []UncertaintyTerm{cert}
	for _, t := range DilutionTerms(name+" preparation", steps) {
		t.Source, t.StdUncertainty, t.Value, t.Exponent = SourceStandard, t.StdUncertainty/t.Value, 1, 1
		out = append(out, t)
	}
	return out
}

// CalibrationTerm returns the concentration of an unknown predicted from the
// curve with u = s(x̂0) of Predict (Miller & Miller eq. 5.9.1/5.10.5 form,
// times the dilution factor) and ν = n − p of the fit, with the Prediction
// itself. For a straight line (with or without intercept) the term carries
// a CurveDraw (with DF = n − p, so the multivariate t), so Monte Carlo
// simulates the ratio x̂0 = (ȳ0 − b0)/b1; for a non-linear curve it
// carries the coefficients and their covariance, so Monte Carlo inverts
// drawn curves; for a quadratic Monte Carlo draws x̂0 from N(x̂0, u²).
//
// A prediction without a concentration (no root, two roots) is an error.
func (r *Report) CalibrationTerm(name string, responses []float64, dilution float64) (UncertaintyTerm, Prediction, error) {
	pr, err := r.Predict(responses, dilution, 0)
	if err != nil {
		return UncertaintyTerm{}, Prediction{}, err
	}
	t, err := r.CalibrationTermOf(name, pr)
	return t, pr, err
}

// CalibrationTermOf is CalibrationTerm for a prediction already made by
// r.Predict (the prediction route and ingest have it), so the readings are
// not inverted twice.
func (r *Report) CalibrationTermOf(name string, pr Prediction) (UncertaintyTerm, error) {
	t, err := r.GUMCalibrationTerm(name, pr)
	if err != nil {
		return UncertaintyTerm{}, err
	}
	if r.Model == Linear || originLine(r.Model) {
		x0 := pr.Concentration / pr.Dilution
		w0 := r.unknownWeight(x0, pr.MeanResponse)
		cd := &CurveDraw{DF: float64(r.DF), MeanY: pr.MeanResponse, Dilution: pr.Dilution, Readings: pr.Readings, ResidualSD: r.ResidualSD,
			SDMeanY: r.ResidualSD / math.Sqrt(float64(pr.Readings)*w0)}
		if r.Model == Linear {
			cd.B0, cd.B1 = r.Coefficients[0], r.Coefficients[1]
			cd.Cov = [2][2]float64{{r.Covariance[0][0], r.Covariance[0][1]}, {r.Covariance[1][0], r.Covariance[1][1]}}
		} else {
			cd.B1 = r.Coefficients[0]
			cd.Cov[1][1] = r.Covariance[0][0]
		}
		t.Curve = cd
	}
	if c := curveOf(r.Model); c != nil && r.Covariance != nil && pr.Dilution > 0 {
		// A non-linear curve: Monte Carlo draws its coefficients and inverts
		// it, so that the skew near an asymptote shows.
		x0 := pr.Concentration / pr.Dilution
		cv := r.newCurveVar(c, pr.Readings)
		fx := c.Eval(x0, r.Coefficients, nil)
		v := cv.varAt(fx, make([]float64, len(r.Coefficients))) // s²/(m·w0): the curve's own term left out
		t.Curve = &CurveDraw{DF: float64(r.DF), MeanY: pr.MeanResponse, Dilution: pr.Dilution, Readings: pr.Readings,
			ResidualSD: r.ResidualSD, SDMeanY: math.Sqrt(v), Model: r.Model, Params: r.Coefficients, ParamCov: r.Covariance}
	}
	return t, nil
}

// GUMCalibrationTerm is CalibrationTermOf without the CurveDraw: the term
// as ComputeBudget uses it (Monte Carlo then draws x̂0 from N(x̂0, u²)). It
// allocates nothing.
func (r *Report) GUMCalibrationTerm(name string, pr Prediction) (UncertaintyTerm, error) {
	if !pr.HasEstimate() {
		return UncertaintyTerm{}, inputErr("responses", "the curve gives no single concentration for these readings: %s", pr.Method)
	}
	return UncertaintyTerm{Name: name, Source: SourceCalibration, Kind: DistNormal, Value: pr.Concentration,
		StdUncertainty: pr.StandardError, DF: float64(r.DF)}, nil
}

// checkedMeanSD is meanSD for caller input: it refuses fewer than two values
// and any value that is not finite, naming field.
func checkedMeanSD(field string, v []float64) (mean, sd float64, err error) {
	if len(v) < 2 {
		return 0, 0, inputErr(field, "need at least two values, got %d", len(v))
	}
	for i, x := range v {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return 0, 0, inputErr(field+"["+strconv.Itoa(i)+"]", "not a finite number")
		}
	}
	mean, sd = meanSD(v)
	return mean, sd, nil
}

// resolveHead returns the input with the defaults of its model, coverage,
// level and constant filled in (not its terms'), or an error that names the
// offending field.
func (in BudgetInput) resolveHead() (BudgetInput, error) {
	if in.Model == "" {
		in.Model = ModelProduct
	}
	if in.Model != ModelSum && in.Model != ModelProduct {
		return in, inputErr("model", "unknown budget model %q", in.Model)
	}
	if in.Coverage == "" {
		in.Coverage = CoverageStudentT
	}
	if in.Coverage != CoverageStudentT && in.Coverage != CoverageK2 {
		return in, inputErr("coverage", "unknown coverage %q", in.Coverage)
	}
	if in.Level == 0 {
		in.Level = 0.95
	}
	if !(in.Level > 0 && in.Level < 1) {
		return in, inputErr("level", "must lie in (0, 1), got %v", in.Level)
	}
	if in.Model == ModelProduct && in.Constant == 0 {
		in.Constant = 1
	}
	if math.IsNaN(in.Constant) || math.IsInf(in.Constant, 0) {
		return in, inputErr("constant", "not a finite number")
	}
	if len(in.Terms) == 0 {
		return in, inputErr("terms", "a budget needs at least one term")
	}
	return in, nil
}

// resolved returns the input with its defaults filled in, or an error that
// names the offending field.
func (in BudgetInput) resolved() (BudgetInput, error) {
	in, err := in.resolveHead()
	if err != nil {
		return in, err
	}
	terms := make([]UncertaintyTerm, len(in.Terms))
	for i, t := range in.Terms {
		if terms[i], err = resolveTerm(in.Model, i, t, func(j int) *UncertaintyTerm { return &terms[j] }); err != nil {
			return in, err
		}
	}
	in.Terms = terms
	return in, nil
}

// termField names term i in an error.
func termField(i int, name string) string {
	return "terms[" + strconv.Itoa(i) + "]." + name
}

// resolveTerm returns term i of a budget of model with its defaults filled
// in, or an error naming the offending field; earlier(j) is the resolved
// term j < i (a term of a correlation group must match the group's first).
func resolveTerm(model BudgetModel, i int, t UncertaintyTerm, earlier func(j int) *UncertaintyTerm) (UncertaintyTerm, error) {
	if t.Kind == "" {
		t.Kind = DistNormal
	}
	if t.Kind != DistNormal && t.Kind != DistRectangular && t.Kind != DistTypeA {
		return t, inputErr(termField(i, "kind"), "unknown distribution %q", t.Kind)
	}
	if t.Sensitivity == 0 {
		t.Sensitivity = 1
	}
	if t.Exponent == 0 {
		t.Exponent = 1
	}
	if t.DF == 0 {
		t.DF = math.Inf(1)
	}
	for _, c := range [...]struct {
		name string
		v    float64
	}{{"value", t.Value}, {"std_uncertainty", t.StdUncertainty}, {"sensitivity", t.Sensitivity}, {"exponent", t.Exponent}} {
		if math.IsNaN(c.v) || math.IsInf(c.v, 0) {
			return t, inputErr(termField(i, c.name), "not a finite number")
		}
	}
	if t.StdUncertainty < 0 {
		return t, inputErr(termField(i, "std_uncertainty"), "must be ≥ 0, got %v", t.StdUncertainty)
	}
	if !(t.DF >= 1) {
		return t, inputErr(termField(i, "df"), "degrees of freedom must be ≥ 1 or infinite (0), got %v", t.DF)
	}
	if model == ModelProduct && t.Value == 0 {
		return t, inputErr(termField(i, "value"), "a product model cannot hold a zero factor")
	}
	if t.Group != "" {
		if t.Curve != nil {
			return t, inputErr(termField(i, "group"), "a calibration term with a curve cannot be in a correlation group")
		}
		// Groups are few: the first term of the group is found by a scan
		// of the terms before, which allocates nothing.
		for j := range i {
			if e := earlier(j); e.Group == t.Group {
				if e.Kind != t.Kind || e.DF != t.DF {
					return t, inputErr(termField(i, "group"), "terms of group %q must share distribution and degrees of freedom", t.Group)
				}
				break
			}
		}
	}
	return t, nil
}

// modelValue returns y = f(x) for the resolved input at the values x.
func (in *BudgetInput) modelValue(x func(i int) float64) float64 {
	return modelValue(in.Model, in.Constant, len(in.Terms), func(i int) *UncertaintyTerm { return &in.Terms[i] }, x)
}

// modelValue returns y = f(x) of a model with the constant and the n
// resolved terms term(i) at the values x.
func modelValue(model BudgetModel, constant float64, n int, term func(i int) *UncertaintyTerm, x func(i int) float64) float64 {
	y := constant
	if model == ModelSum {
		for i := range n {
			y += term(i).Sensitivity * x(i)
		}
		return y
	}
	for i := range n {
		if p := term(i).Exponent; p == 1 {
			y *= x(i)
		} else if p == -1 {
			y /= x(i)
		} else {
			y *= math.Pow(x(i), p)
		}
	}
	return y
}

// ComputeBudget combines the terms of a measurement model by the law of
// propagation of uncertainty (JCGM 100 eq. 10, 13):
//
//	u_c² = Σ_g (Σ_{i∈g} c_i·u_i)²
//
// where each correlation group g is fully correlated (r = +1) and a term
// without a group is a group of its own; for ModelProduct c_i = p_i·y/x_i,
// so u_c/|y| = √Σ(p_i·u_i/x_i)² for independent terms. Welch–Satterthwaite
// (JCGM 100 eq. G.2b): ν_eff = u_c⁴/Σ_g(u_g⁴/ν_g), ν_g the group's common ν.
// k is t((1+p)/2; ⌊ν_eff⌋) or 2 (see Coverage); U = k·u_c is rounded to two
// significant figures and y to the same decimal place (JCGM 100 §7.2.6).
//
// Preconditions (else a *InputError naming the term and field): at least
// one term, every value and uncertainty finite, u ≥ 0, ν ≥ 1 or infinite, no
// zero factor in a product model, the terms of a group of one kind and ν.
func ComputeBudget(in BudgetInput) (Budget, error) {
	var b Budget
	if err := ComputeBudgetInto(in, &b); err != nil {
		return Budget{}, err
	}
	b.Cautions = Cautions()
	var buf [32]byte
	b.ExpandedText = string(b.AppendExpandedText(buf[:0]))
	b.ValueText = string(b.AppendValueText(buf[:0]))
	return b, nil
}

// ComputeBudgetInto is ComputeBudget into dst without the cautions and the
// texts (ExpandedText and ValueText are left empty: AppendExpandedText and
// AppendValueText write them). It reuses the array of dst.Terms and, when
// that holds the terms, allocates nothing: for a caller that computes many
// budgets and states the cautions once. On an error dst is left undefined.
func ComputeBudgetInto(in BudgetInput, dst *Budget) error {
	in, err := in.resolveHead()
	if err != nil {
		return err
	}
	terms := dst.Terms[:0]
	if cap(terms) < len(in.Terms) {
		terms = make([]TermResult, len(in.Terms))
	}
	terms = terms[:len(in.Terms)]
	for i, t := range in.Terms {
		rt, err := resolveTerm(in.Model, i, t, func(j int) *UncertaintyTerm { return &terms[j].UncertaintyTerm })
		if err != nil {
			return err
		}
		terms[i] = TermResult{UncertaintyTerm: rt}
	}
	y := modelValue(in.Model, in.Constant, len(terms), func(i int) *UncertaintyTerm { return &terms[i].UncertaintyTerm },
		func(i int) float64 { return terms[i].Value })
	if math.IsNaN(y) || math.IsInf(y, 0) {
		return inputErr("terms", "the model value is outside the numerically usable range")
	}
	*dst = Budget{Model: in.Model, Value: y, Coverage: in.Coverage, Level: in.Level, Terms: terms}
	b := dst
	// groupSum returns the sum of the contributions of group g's terms (a
	// scan: groups are few, and a map would be allocated per budget).
	groupSum := func(g string) float64 {
		var sum float64
		for _, t := range b.Terms {
			if t.Group == g {
				sum += t.Contribution
			}
		}
		return sum
	}
	for i := range b.Terms {
		t := &b.Terms[i]
		c := t.Sensitivity
		if in.Model == ModelProduct {
			c = t.Exponent * y / t.Value
		}
		rel := math.NaN()
		if t.Value != 0 {
			rel = t.StdUncertainty / math.Abs(t.Value)
		}
		t.Coefficient, t.Contribution, t.Relative = c, c*t.StdUncertainty, rel
	}
	// ug returns the contribution of term i's component: its group's sum,
	// or its own; first reports whether i is the first term of it.
	ug := func(i int) (u float64, first bool) {
		t := &b.Terms[i]
		if t.Group == "" {
			return t.Contribution, true
		}
		return groupSum(t.Group), firstOfGroup(b.Terms, i)
	}
	var uc2 float64
	for i := range b.Terms {
		if u, first := ug(i); first {
			uc2 += u * u
		}
	}
	b.Combined = math.Sqrt(uc2)
	if math.IsInf(b.Combined, 0) || math.IsNaN(b.Combined) {
		return inputErr("terms", "the combined uncertainty is outside the numerically usable range")
	}
	// Shares, and Welch–Satterthwaite in the scale-free form
	// 1/ν_eff = Σ_g (u_g/u_c)⁴/ν_g, which cannot overflow.
	var ws float64
	for i := range b.Terms {
		t := &b.Terms[i]
		u, first := ug(i)
		if uc2 > 0 {
			t.Share = t.Contribution * u / uc2
			if first {
				ws += wsTerm(u/b.Combined, t.DF)
			}
		}
	}
	b.RelativeCombined = math.NaN()
	if y != 0 {
		b.RelativeCombined = b.Combined / math.Abs(y)
	}
	b.EffectiveDF = math.Inf(1)
	if ws > 0 {
		b.EffectiveDF = 1 / ws
	}
	b.CoverageFactor = coverageFactor(in.Coverage, in.Level, b.EffectiveDF)
	b.ExpandedExact = b.CoverageFactor * b.Combined
	if b.ExpandedExact == 0 {
		// No uncertainty gives no rounding place: y is kept as it is.
		b.ValueRounded = y
		return nil
	}
	var place int
	b.Expanded, place = roundSig2(b.ExpandedExact, in.RoundUp)
	b.ValueRounded = scaleRound(y, place, false)
	b.Decimals = max(0, -place)
	return nil
}

// AppendExpandedText appends U as ExpandedText states it: with Decimals
// digits after the point, "0" when U is 0.
func (b *Budget) AppendExpandedText(dst []byte) []byte {
	if b.ExpandedExact == 0 {
		return append(dst, '0')
	}
	return strconv.AppendFloat(dst, b.Expanded, 'f', b.Decimals, 64)
}

// AppendValueText appends y as ValueText states it: rounded to U's place
// with Decimals digits after the point; unrounded (shortest form) when U is 0.
func (b *Budget) AppendValueText(dst []byte) []byte {
	if b.ExpandedExact == 0 {
		return strconv.AppendFloat(dst, b.ValueRounded, 'g', -1, 64)
	}
	return strconv.AppendFloat(dst, b.ValueRounded, 'f', b.Decimals, 64)
}

// firstOfGroup reports whether term i is the first of its group.
func firstOfGroup(ts []TermResult, i int) bool {
	for j := 0; j < i; j++ {
		if ts[j].Group == ts[i].Group {
			return false
		}
	}
	return true
}

// wsTerm is u⁴/ν, 0 for infinite ν.
func wsTerm(u, df float64) float64 {
	if math.IsInf(df, 1) {
		return 0
	}
	u2 := u * u
	return u2 * u2 / df
}

// maxTDF is the ν_eff above which k is the normal quantile: t(0.975; 10⁶)
// and z(0.975) differ by 2e-6.
const maxTDF = 1_000_000

// coverageFactor returns k for the coverage rule, the level of confidence p
// and ν_eff: t((1+p)/2; ⌊ν_eff⌋) (JCGM 100 §G.4.2 truncates) or 2.
func coverageFactor(c Coverage, level, dfEff float64) float64 {
	if c == CoverageK2 {
		return 2
	}
	q := 1 - (1-level)/2
	if dfEff >= maxTDF {
		return distuv.UnitNormal.Quantile(q)
	}
	df := int(math.Floor(dfEff))
	if df < 1 {
		df = 1
	}
	return studentT(q, df)
}

// roundSig2 rounds u > 0 to two significant figures, to nearest (half away
// from zero) or up, and returns the place e of the second figure (the
// result is a multiple of 10^e). 0, NaN and ±Inf are returned with e = 0.
func roundSig2(u float64, up bool) (float64, int) {
	if !(u > 0) || math.IsInf(u, 0) {
		return u, 0
	}
	e := int(math.Floor(math.Log10(u))) - 1 // place of the second significant figure
	for range 2 {
		r := scaleRound(u, e, up)
		if r >= 100*pow10(e) { // rounding carried into a third figure
			e++
			continue
		}
		if r < 10*pow10(e)*(1-1e-12) { // log10 was one too high
			e--
			continue
		}
		break
	}
	return scaleRound(u, e, up), e
}

// scaleRound rounds v to a multiple of 10^e, to nearest or up (away from 0).
func scaleRound(v float64, e int, up bool) float64 {
	round := math.Round
	if up {
		round = func(x float64) float64 {
			// A hair of tolerance, so 0.12 (= 0.1199999…) does not round up to 0.13.
			return math.Ceil(x - 1e-9)
		}
	}
	if e < 0 {
		p := pow10(-e)
		return round(v*p) / p
	}
	p := pow10(e)
	return round(v/p) * p
}

// pow10Table holds math.Pow(10, e) for |e| ≤ 40, computed by math.Pow
// itself, so that pow10 gives exactly what math.Pow gives, without its cost
// (every budget rounds U and y).
var pow10Table = func() (t [81]float64) {
	for i := range t {
		t[i] = math.Pow(10, float64(i-40))
	}
	return t
}()

// pow10 is math.Pow(10, e).
func pow10(e int) float64 {
	if e >= -40 && e <= 40 {
		return pow10Table[e+40]
	}
	return math.Pow(10, float64(e))
}
