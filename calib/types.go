// Package calib is curvekeeper's numerical core: weighted least-squares
// calibration curves, their acceptance checks, detection limits and the
// inverse prediction of unknown concentrations.
//
// It imports only the standard library and gonum, so it can be used and
// tested on its own. Every result it produces supports, and never replaces,
// the laboratory's accredited procedures: local accreditation, regulation and
// the method SOP come first, and a qualified person reviews results before
// release (see Cautions).
package calib

// EngineVersion identifies the numerical behaviour of this package. It is
// stored with every fit so that history never silently changes; bump it
// whenever a reported number could change for the same input.
const EngineVersion = "calib/1.1.0"

// Model is the form of the response curve.
type Model string

// The supported models. Coefficients are always reported in the order of the
// model equation.
const (
	Linear       Model = "linear"        // y = b0 + b1·x, coefficients [b0, b1]
	LinearOrigin Model = "linear_origin" // y = b1·x, coefficients [b1]
	Quadratic    Model = "quadratic"     // y = b0 + b1·x + b2·x², coefficients [b0, b1, b2] (ISO 8466-2)
)

// Weighting is the weighting scheme of the least-squares fit.
type Weighting string

// The supported weighting schemes. Auto chooses among the others by the
// smallest sum of absolute relative errors of the back-calculated standards
// among those in which no level holds more than half of the total weight
// (Almeida et al., J. Chromatogr. B 774 (2002) 215, who compare 1/x^0.5,
// 1/x, 1/x², 1/y^0.5, 1/y and 1/y²).
const (
	WeightNone     Weighting = "none"
	WeightInvSqrtX Weighting = "1/x^0.5"
	WeightInvX     Weighting = "1/x"
	WeightInvX2    Weighting = "1/x^2"
	WeightInvSqrtY Weighting = "1/y^0.5"
	WeightInvY     Weighting = "1/y"
	WeightInvY2    Weighting = "1/y^2"
	WeightInvS2    Weighting = "1/s^2" // 1/s(x)² from a variance function fitted across levels
	WeightAuto     Weighting = "auto"
)

// Weightings lists every scheme a method may name, auto last.
func Weightings() []Weighting {
	return []Weighting{WeightNone, WeightInvSqrtX, WeightInvX, WeightInvX2, WeightInvSqrtY, WeightInvY, WeightInvY2, WeightInvS2, WeightAuto}
}

// SigmaBasis names the σ of the ICH Q2(R2) limits LOD = 3.3·σ/S and
// LOQ = 10·σ/S.
type SigmaBasis string

// The σ bases. ICH Q2(R2) allows the SD of the blank, the residual SD of the
// regression or the SD of the intercept; with weights, the residual SD is
// the SD of a reading of unit weight, not the SD at the low end.
const (
	SigmaAuto        SigmaBasis = "auto"            // blank SD when enough blanks were read, else lowest_level_sd
	SigmaBlank       SigmaBasis = "blank_sd"        // SD of the readings at nominal zero
	SigmaLowestLevel SigmaBasis = "lowest_level_sd" // s/√w at the lowest non-zero standard: the SD the weighting implies there
	SigmaResidual    SigmaBasis = "residual_sd"     // s(y/x) itself, the SD of a reading of unit weight (calib/1.0.0)
)

// SigmaBases lists every SigmaBasis a method may name.
func SigmaBases() []SigmaBasis {
	return []SigmaBasis{SigmaAuto, SigmaBlank, SigmaLowestLevel, SigmaResidual}
}

// WeightOptions is a method's configuration of weighting and of the σ of
// its limits. Zero values select DefaultWeightOptions' values.
type WeightOptions struct {
	// MinReplicates is the fewest readings every non-zero level needs for
	// 1/s² to be a candidate of auto, and for a chosen 1/s² not to be
	// flagged (FitFlagFewReplicates); also the fewest blank readings
	// SigmaAuto takes the blank's SD from. At least 2.
	MinReplicates int
	// LimitSigma is the σ of LOD and LOQ.
	LimitSigma SigmaBasis
}

// DefaultWeightOptions returns the weighting configuration used when a method
// sets none.
//
//   - MinReplicates 3: an SD from two readings has one degree of freedom and
//     its 95 % range spans a factor of about 70 (χ² with 1 df, computed);
//     three readings give two degrees of freedom per level (a factor of about
//     12), the fewest from which a level SD says anything, and the variance
//     function pools those over the levels (common practice; ISO 8466-1 asks
//     for ten readings at the ends of the range for its variance test).
//   - LimitSigma auto: the blank's SD when the run has MinReplicates or more
//     blank readings (ICH Q2(R2) "standard deviation of the blank"), else the
//     SD the weighting implies at the lowest standard (the residual SD of the
//     regression at the low end, which is what the LOD speaks of).
func DefaultWeightOptions() WeightOptions {
	return WeightOptions{MinReplicates: 3, LimitSigma: SigmaAuto}
}

// MaxLevelWeightShare is the largest share of the total weight one level may
// hold before the fit is flagged (FitFlagDominantLevel) and before auto
// passes a candidate over: above it, the curve is fitted to one level and
// the others hardly count (common practice).
const MaxLevelWeightShare = 0.5

// Fit flags, as reported in Report.Flags: facts about the fit a reviewer
// should see, which decide no verdict.
const (
	FitFlagDominantLevel = "dominant_level_weight" // one level holds more than MaxLevelWeightShare of the total weight
	FitFlagFewReplicates = "few_replicates_for_s2" // 1/s² with a level below WeightOptions.MinReplicates readings
)

// Check names, as reported in Report.Checks.
const (
	CheckMinLevels        = "min_levels"
	CheckMandel           = "mandel"
	CheckLackOfFit        = "lack_of_fit"
	CheckHomoscedasticity = "homoscedasticity"
	CheckBackCalculation  = "back_calculation"
	CheckRSquared         = "r_squared"
	CheckRSE              = "relative_standard_error"
	CheckIntercept        = "intercept"
	CheckResidualRuns     = "residual_runs"
	CheckOutliers         = "outliers"
	CheckMonotonic        = "monotonic"
)

// Prediction flags.
const (
	FlagBelowRange   = "below_range"        // below the lowest accepted standard
	FlagAboveRange   = "above_range"        // above the highest accepted standard (extrapolation)
	FlagBelowLOD     = "below_lod"          // below the ICH Q2 detection limit
	FlagBelowLOQ     = "below_loq"          // below the ICH Q2 quantification limit
	FlagNegative     = "negative"           // negative point estimate
	FlagNoRoot       = "no_root_in_range"   // no root on the calibrated (monotone) branch of the curve
	FlagAmbiguous    = "ambiguous_root"     // two roots in the working range (curve not monotonic): no concentration
	FlagUnbounded    = "unbounded_interval" // Fieller g ≥ 1 or band does not close: no finite interval
	FlagExtrapolated = "extrapolated"       // set together with below_range or above_range
)

// Point is one reading of a calibration standard: every replicate reading is
// its own Point (and its own observation in the fit).
type Point struct {
	Level    string  // the standard's level label, e.g. "L3"; readings of one level share it
	X        float64 // nominal concentration
	Y        float64 // instrument response
	Excluded bool    // excluded from the fit (still reported, with back-calculation)
}

// Options selects the model, the weighting and the acceptance policy.
type Options struct {
	Model      Model
	Weighting  Weighting
	Confidence float64 // two-sided confidence level for intervals; 0 means 0.95
	Policy     Policy
	Weights    WeightOptions // zero fields take DefaultWeightOptions' values
	// Curve seeds or holds coefficients of a non-linear model by name
	// (empty for the least-squares models).
	Curve CurveParameters
}

// Policy holds every acceptance threshold. DefaultPolicy documents the
// default of each and its source; the laboratory's method overrides them.
type Policy struct {
	MinLevels               int     // minimum number of distinct non-excluded levels
	MandelAlpha             float64 // Mandel fitting test significance (ISO 8466-1: 0.01)
	LackOfFitAlpha          float64 // lack-of-fit F-test significance
	HomoscedasticityAlpha   float64 // ISO 8466-1 variance test significance (0.01)
	BackCalcTolerancePct    float64 // |%RE| allowed for back-calculated standards (ICH M10: 15)
	BackCalcLowTolerancePct float64 // |%RE| allowed at the lowest level (ICH M10: 20)
	BackCalcMinPassFraction float64 // fraction of standards that must pass (ICH M10: 0.75)
	MinRSquared             float64 // (US EPA SW-846 8000D: 0.99)
	MaxRSEPct               float64 // relative standard error (US EPA SW-846 8000D: 20)
	MaxRFRSDPct             float64 // %RSD of the response factors of the average RF model; 0: DefaultRFMaxRSDPct
	InterceptAlpha          float64 // significance of the intercept t-test
	RunsAlpha               float64 // residual sign runs test significance
	OutlierStudentized      float64 // |internally studentised residual| above which a reading is an outlier (3)
	OutlierCooksD           float64 // Cook's distance above which a reading is influential (1)
	// Mandatory lists the checks (by name) whose failure fails the verdict.
	// A check not listed is advisory.
	Mandatory []string
}

// Report is the full result of a fit. Predict uses only its exported fields,
// so a Report that was stored (for example as JSON) and loaded again predicts
// exactly as the original.
type Report struct {
	Model              Model
	Weighting          Weighting // the scheme used (the chosen one when Auto was requested)
	WeightingRequested Weighting
	// WeightingAdvised is the scheme auto chooses for these readings, also
	// when the method fixed another one; "" when no candidate could be scored.
	WeightingAdvised Weighting
	// WeightCandidates is every candidate's score, with auto and with a fixed
	// weighting alike, so a reviewer sees what auto would have chosen.
	WeightCandidates []WeightScore
	// HeaviestLevel is the level holding the largest share of the total weight.
	HeaviestLevel LevelShare
	// Flags are FitFlag values: facts about the fit that decide no verdict.
	Flags            []string
	WeightConvention string // e.g. "weights normalised to sum to n = 16 before residual_sd"
	ZeroHandling     string // how zero x or y were kept from producing infinite weights
	// WeightScale turns the scheme's raw weight of a reading into its weight on
	// the Σw = n scale: w = WeightScale·raw. Raw weights are taken relative to
	// WeightFloor, e.g. (WeightFloor/max(|x|, WeightFloor))² for 1/x².
	WeightScale float64
	// WeightFloor is the smallest non-zero |x| (1/x, 1/x²), |y| (1/y, 1/y²)
	// or level SD (1/s²) among the fitted standards; a smaller value, zero
	// included, is weighted as the floor. 0 for unweighted fits.
	WeightFloor float64

	Coefficients   []float64   // in model-equation order
	StandardErrors []float64   // same order
	Covariance     [][]float64 // s²(XᵀWX)⁻¹
	ResidualSD     float64     // s(y/x), on the Σw = n weight scale
	DF             int         // n − p
	RSquared       float64     // weighted; uncentred for LinearOrigin
	N              int         // readings in the fit
	Levels         int         // distinct levels in the fit
	Confidence     float64

	// Sufficient statistics for inverse prediction (Σw = n scale).
	SumW     float64       // Σw (= N)
	MeanXW   float64       // x̄w
	MeanYW   float64       // ȳw
	SxxW     float64       // Σw(x − x̄w)²
	SumWX2   float64       // Σw·x² (for the origin model)
	Variance VarianceModel // for 1/s²: the variance function giving every weight

	Points   []PointResult
	Checks   []Check
	Limits   Limits
	Range    Range
	Verdict  string // "pass" or "fail", from the checks the policy makes mandatory
	Cautions []string
	Engine   string // EngineVersion
	// Curve holds what a non-linear model adds (parameter names, solver
	// outcome, θ, precision profile, anchors); nil for the least-squares
	// models.
	Curve *CurveDetails `json:",omitempty"`
	// RF holds the response factors of the average RF model (AverageRF);
	// nil for every other model.
	RF *RFDetails `json:",omitempty"`
}

// WeightScore is one candidate of automatic weight selection.
type WeightScore struct {
	Weighting Weighting
	SumAbsRE  float64 // Σ|%RE| of back-calculated standards
	Scored    bool    // SumAbsRE was computed
	// MaxLevelShare is the largest share of the total weight one level holds
	// under this candidate (0 when it was not fitted).
	MaxLevelShare float64
	Chosen        bool   // the scheme the fit used
	Advised       bool   // the scheme auto chooses
	Note          string // why a candidate was skipped or passed over, if it was
}

// LevelShare is one level's share of the total weight.
type LevelShare struct {
	X     float64 // the level's nominal concentration
	Share float64 // Σw of its readings / Σw of all fitted readings
}

// VarianceModel describes how the response SD varies with concentration,
// fitted across levels for 1/s² weighting. Kind "power" (calib/1.1.0):
// s(x) = C0·max(x, Floor)^C1, Floor the smallest non-zero fitted
// concentration. Kind "linear_sd" (reports of calib/1.0.0, still read):
// s(x) = C0 + C1·x with Floor the smallest non-zero level SD.
type VarianceModel struct {
	Kind string // "" when unused, else "power" or "linear_sd"
	C0   float64
	C1   float64
	// Floor keeps every weight finite, see Kind.
	Floor float64
}

// PointResult is one reading with its diagnostics.
type PointResult struct {
	Level            string
	X                float64
	Y                float64
	Weight           float64 // on the Σw = n scale; 0 when excluded
	Excluded         bool
	Fitted           float64
	Residual         float64
	WeightedResidual float64 // √w·residual
	Leverage         float64
	Studentized      float64 // internally studentised residual
	CooksDistance    float64
	BackCalculated   float64 // concentration read back from the curve
	RelativeErrorPct float64 // 100·(back − nominal)/nominal; 0 with HasRelativeError false for nominal 0
	HasRelativeError bool
	HasBackCalc      bool // false when the curve has no root for this response
}

// Check is one acceptance or diagnostic rule.
type Check struct {
	Name      string
	Statistic float64
	Limit     float64
	Passed    bool
	Computed  bool // false when it could not be computed; then Passed is false and Detail says why
	Mandatory bool
	Source    string
	Detail    string
}

// Limits holds detection and quantification limits, in concentration units
// except CriticalValue (a response).
type Limits struct {
	LOD            float64    // ICH Q2: 3.3·σ/S, σ as SigmaBasis says
	LOQ            float64    // ICH Q2: 10·σ/S
	SigmaBasis     SigmaBasis // the σ used (never SigmaAuto)
	Sigma          float64    // its value, in response units
	CriticalValue  float64    // ISO 11843-2 critical value of the response, y_c
	CriticalConc   float64    // ISO 11843-2 critical value of the net concentration, x_c
	DetectionLimit float64    // ISO 11843-2 minimum detectable value, x_d ≈ 2·x_c
	Computed       bool
	Detail         string
}

// Range is the working range, from the lowest to the highest accepted
// non-zero standard (a blank in the fit does not extend it; see workingRange).
type Range struct {
	Low  float64
	High float64
}

// Prediction is the inverse prediction of one unknown.
type Prediction struct {
	Concentration float64 // after the dilution factor
	StandardError float64 // approximate (Miller & Miller form), after dilution
	Interval      Interval
	Flags         []string
	Method        string // how the interval was obtained, e.g. "fieller"
	Readings      int
	MeanResponse  float64
	Dilution      float64
	Cautions      []string // the same cautions as every Report (see Cautions)
}

// HasEstimate reports whether the prediction carries a concentration: not
// when the curve has no root for the response, nor when it has two in the
// working range (then Concentration and StandardError are 0 and mean nothing).
func (p *Prediction) HasEstimate() bool {
	for _, f := range p.Flags {
		if f == FlagNoRoot || f == FlagAmbiguous || f == FlagAboveAsymptote || f == FlagBelowAsymptote {
			return false
		}
	}
	return true
}

// Interval is a confidence interval. When Bounded is false Low and High are 0
// and carry no meaning: the interval is unbounded.
type Interval struct {
	Low     float64
	High    float64
	Level   float64
	Bounded bool
	// HighOpen: the interval is bounded below by Low and open above (+∞),
	// as when the inverted prediction band of a non-linear curve does not
	// close under its upper asymptote. Bounded is false.
	HighOpen bool `json:",omitempty"`
}
