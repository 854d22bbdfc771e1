package calib

import (
	"math"
	"strconv"
)

// DefaultRFMaxRSDPct is the default linearity limit of the average response
// factor model: the %RSD of the response factors must not exceed 20 %, after
// US EPA SW-846 Method 8000D ([M]: recalled, confirm the clause against the
// method). The laboratory's method overrides it.
const DefaultRFMaxRSDPct = 20

// DefaultRFMinLevels is the fewest distinct non-zero levels the average RF
// model asks for before it is judged (SW-846 8000D asks for at least five
// standards for an initial calibration, [M]).
const DefaultRFMinLevels = 5

// RFSource names where the response factor and its default limit come from.
const RFSource = "RF = (A_x·C_is)/(A_is·C_x), US EPA SW-846 Method 8000 §11.4.3 (as transcribed); average-RF linearity %RSD ≤ 20 % after SW-846 8000D (from memory); the laboratory's method overrides it"

// RFPoint is one reading of a calibration standard for the response factor
// model. With an internal standard, ISConc and ISResponse are both > 0 for
// every point; without one, both are 0 for every point.
type RFPoint struct {
	Level      string
	Conc       float64 // C_x, the analyte's nominal concentration; 0 for a blank (not used in the RFs)
	Response   float64 // A_x
	ISConc     float64 // C_is
	ISResponse float64 // A_is
}

// RFOptions configures the average response factor model. Zero values take
// the defaults.
type RFOptions struct {
	MaxRSDPct  float64 // 0: DefaultRFMaxRSDPct
	MinLevels  int     // 0: DefaultRFMinLevels
	Confidence float64 // of prediction intervals; 0: 0.95
}

// RFModel is a fitted average response factor model.
type RFModel struct {
	Internal   bool      // relative response factors (with an internal standard)
	RFs        []float64 // RF_i of every non-zero reading, in input order
	Levels     []string  // the level of each RF
	Mean       float64   // RF̄
	SD         float64   // s_RF, with k − 1 degrees of freedom
	RSDPct     float64   // 100·s_RF/RF̄
	K          int       // number of RFs (readings), each one observation
	MaxRSDPct  float64
	Linear     bool // RSDPct ≤ MaxRSDPct and at least MinLevels levels
	Range      Range
	Confidence float64
	Detail     string
	Source     string
	Cautions   []string
}

// FitAverageRF fits the average response factor model:
//
//	RF_i = (A_x·C_is)/(A_is·C_x)   (with an internal standard; RRF)
//	RF_i = A_x/C_x                 (external standard)
//	RF̄ = Σ RF_i / k,  s_RF = √[Σ(RF_i − RF̄)²/(k − 1)],  %RSD = 100·s_RF/RF̄
//
// (US EPA SW-846 8000 §11.4.3 as transcribed in FIELD-NOTES §8). Every
// non-zero reading gives one RF (replicates are separate RFs); readings at
// nominal zero are blanks and give none. The model is judged linear when
// %RSD ≤ MaxRSDPct and at least MinLevels distinct non-zero levels were
// read. The working range runs from the lowest to the highest non-zero
// standard.
//
// Preconditions: finite values; Conc ≥ 0, Response ≥ 0; the internal-standard
// fields either > 0 on every point or 0 on every point; at least two non-zero
// readings with RF̄ > 0. Otherwise a *InputError naming the point.
func FitAverageRF(points []RFPoint, opt RFOptions) (*RFModel, error) {
	if err := checkRFOptions(&opt); err != nil {
		return nil, err
	}
	if len(points) == 0 {
		return nil, inputErr("points", "no calibration readings")
	}
	m := &RFModel{Internal: points[0].ISResponse != 0 || points[0].ISConc != 0, MaxRSDPct: opt.MaxRSDPct,
		Confidence: opt.Confidence, Source: RFSource, Cautions: Cautions()}
	levels := map[string]bool{}
	first := true
	for i, p := range points {
		f := "points[" + strconv.Itoa(i) + "]"
		for _, v := range [...]float64{p.Conc, p.Response, p.ISConc, p.ISResponse} {
			if math.IsNaN(v) || math.IsInf(v, 0) || v < 0 {
				return nil, inputErr(f, "concentrations and responses must be finite and ≥ 0")
			}
		}
		internal := p.ISResponse != 0 || p.ISConc != 0
		if internal != m.Internal {
			return nil, inputErr(f, "internal-standard fields must be given on every point or on none")
		}
		if internal && !(p.ISResponse > 0 && p.ISConc > 0) {
			return nil, inputErr(f, "internal-standard concentration and response must both be > 0")
		}
		if p.Conc == 0 {
			continue
		}
		rf := p.Response / p.Conc
		if internal {
			rf = (p.Response * p.ISConc) / (p.ISResponse * p.Conc)
		}
		if math.IsInf(rf, 0) || math.IsNaN(rf) {
			return nil, inputErr(f, "response factor overflows: %v/%v", p.Response, p.Conc)
		}
		m.RFs = append(m.RFs, rf)
		m.Levels = append(m.Levels, p.Level)
		levels[p.Level+"\x00"+strconv.FormatFloat(p.Conc, 'g', -1, 64)] = true
		if first || p.Conc < m.Range.Low {
			m.Range.Low = p.Conc
		}
		if first || p.Conc > m.Range.High {
			m.Range.High = p.Conc
		}
		first = false
	}
	m.K = len(m.RFs)
	if m.K < 2 {
		return nil, inputErr("points", "the average response factor needs at least two non-zero readings, got %d", m.K)
	}
	m.Mean, m.SD = meanSD(m.RFs)
	if !(m.Mean > 0) || math.IsInf(m.Mean, 0) || math.IsInf(m.SD, 0) || math.IsNaN(m.SD) {
		return nil, inputErr("points", "mean response factor must be finite and > 0 with a finite SD, got %v and %v", m.Mean, m.SD)
	}
	m.RSDPct = 100 * m.SD / m.Mean
	nLevels := len(levels)
	m.Linear = m.RSDPct <= m.MaxRSDPct && nLevels >= opt.MinLevels
	switch {
	case nLevels < opt.MinLevels:
		m.Detail = "only " + strconv.Itoa(nLevels) + " non-zero levels; the average RF model asks for at least " + strconv.Itoa(opt.MinLevels)
	case !m.Linear:
		m.Detail = "RSD of the response factors " + strconv.FormatFloat(m.RSDPct, 'f', 1, 64) + " % exceeds " + strconv.FormatFloat(m.MaxRSDPct, 'g', -1, 64) + " %: use a fitted curve instead"
	default:
		m.Detail = "RSD of the response factors " + strconv.FormatFloat(m.RSDPct, 'f', 1, 64) + " % ≤ " + strconv.FormatFloat(m.MaxRSDPct, 'g', -1, 64) + " %"
	}
	return m, nil
}

func checkRFOptions(opt *RFOptions) error {
	if math.IsNaN(opt.MaxRSDPct) || math.IsInf(opt.MaxRSDPct, 0) || opt.MaxRSDPct < 0 {
		return inputErr("options.max_rsd_pct", "must be a finite number ≥ 0, got %v", opt.MaxRSDPct)
	}
	if opt.MaxRSDPct == 0 {
		opt.MaxRSDPct = DefaultRFMaxRSDPct
	}
	if opt.MinLevels < 0 {
		return inputErr("options.min_levels", "must be ≥ 0, got %d", opt.MinLevels)
	}
	if opt.MinLevels == 0 {
		opt.MinLevels = DefaultRFMinLevels
	}
	if opt.Confidence == 0 {
		opt.Confidence = 0.95
	}
	if !(opt.Confidence > 0 && opt.Confidence < 1) {
		return inputErr("options.confidence", "must lie between 0 and 1, got %v", opt.Confidence)
	}
	return nil
}

// meanSD returns the mean and the sample SD (n − 1) of v, len(v) ≥ 2.
func meanSD(v []float64) (mean, sd float64) {
	for _, x := range v {
		mean += x
	}
	mean /= float64(len(v))
	var ss float64
	for _, x := range v {
		ss += (x - mean) * (x - mean)
	}
	return mean, math.Sqrt(ss / float64(len(v)-1))
}

// RFPrediction is the concentration of an unknown by the average RF model.
type RFPrediction struct {
	Concentration float64 // x̂0, after the dilution factor
	StandardError float64 // u(x̂0), after dilution
	RelativeSE    float64 // u(x̂0)/x̂0
	Interval      Interval
	MeanResponse  float64 // ȳ0: the mean response, or the mean response ratio A_x/A_is
	Readings      int
	ISConc        float64 // C_is in the sample (internal standard only)
	Dilution      float64
	Flags         []string
	Method        string
	Cautions      []string
}

// Predict returns the concentration of an unknown:
//
//	x̂0 = D·ȳ0/RF̄              (external standard; ȳ0 the mean response)
//	x̂0 = D·ȳ0·C_is/RF̄         (internal standard; ȳ0 the mean of A_x/A_is)
//	u(x̂0)/x̂0 = √[(u(ȳ0)/ȳ0)² + (s_RF/(√k·RF̄))²] = (s_RF/RF̄)·√(1/m + 1/k)
//
// The relative uncertainty follows the GUM rule for a quotient (FIELD-NOTES
// §10) with u(ȳ0)/ȳ0 = (s_RF/RF̄)/√m: the average-RF model assumes a
// constant relative scatter of a reading at known concentration, which the
// calibrators' RFs estimate with k − 1 degrees of freedom. The interval is
// exact under that model: ȳ0/x − RF̄ ~ s_RF·√(1/m + 1/k)·t(k−1), so
//
//	x ∈ [D·c·ȳ0/(RF̄ + t·s_RF·√(1/m+1/k)), D·c·ȳ0/(RF̄ − t·s_RF·√(1/m+1/k))]
//
// (c = C_is or 1), unbounded when RF̄ ≤ t·s_RF·√(1/m+1/k). It is the set of x
// whose prediction band for the mean of m readings, from the line through
// the origin with weights 1/x², contains ȳ0.
//
// responses are the readings A_x; with an internal standard isResponses
// holds each reading's A_is (same length) and isConc the sample's C_is,
// otherwise isResponses is nil and isConc 0. dilution ≥ 1 multiplies the
// result and its uncertainty. Flags: FlagBelowRange or FlagAboveRange with
// FlagExtrapolated when the undiluted x̂0 lies outside the working range,
// FlagNegative, FlagUnbounded.
func (m *RFModel) Predict(responses, isResponses []float64, isConc, dilution float64) (RFPrediction, error) {
	if len(responses) == 0 {
		return RFPrediction{}, inputErr("responses", "at least one reading is needed")
	}
	if math.IsNaN(dilution) || math.IsInf(dilution, 0) || dilution < 1 {
		return RFPrediction{}, inputErr("dilution", "must be a finite number ≥ 1, got %v", dilution)
	}
	c := 1.0
	var ratios []float64
	if m.Internal {
		if !(isConc > 0) || math.IsInf(isConc, 0) {
			return RFPrediction{}, inputErr("is_concentration", "must be a finite number > 0 with an internal standard, got %v", isConc)
		}
		var err error
		if ratios, err = ResponseRatios(responses, isResponses); err != nil {
			return RFPrediction{}, err
		}
		c = isConc
	} else {
		if isResponses != nil || isConc != 0 {
			return RFPrediction{}, inputErr("is_responses", "the model has no internal standard")
		}
		for i, y := range responses {
			if math.IsNaN(y) || math.IsInf(y, 0) {
				return RFPrediction{}, inputErr("responses["+strconv.Itoa(i)+"]", "must be finite, got %v", y)
			}
		}
		ratios = responses
	}
	mr := len(ratios)
	var y0 float64
	for _, y := range ratios {
		y0 += y
	}
	y0 /= float64(mr)
	root := math.Sqrt(1/float64(mr) + 1/float64(m.K))
	rel := m.SD / m.Mean * root
	x0 := y0 * c / m.Mean
	if math.IsInf(x0*dilution, 0) || math.IsNaN(x0*dilution) {
		return RFPrediction{}, inputErr("responses", "the concentration overflows: mean response %v", y0)
	}
	p := RFPrediction{Concentration: dilution * x0, MeanResponse: y0, Readings: mr, Dilution: dilution,
		RelativeSE: rel, StandardError: math.Abs(dilution*x0) * rel, Method: "average_rf_t_pivot",
		Interval: Interval{Level: m.Confidence}, Cautions: Cautions()}
	if m.Internal {
		p.ISConc = isConc
	}
	t := studentT(1-(1-m.Confidence)/2, m.K-1)
	half := t * m.SD * root
	if m.Mean > half && y0 >= 0 {
		p.Interval.Low = dilution * c * y0 / (m.Mean + half)
		p.Interval.High = dilution * c * y0 / (m.Mean - half)
		p.Interval.Bounded = true
	}
	p.Flags = m.Range.appendFlags(p.Flags, x0)
	if !p.Interval.Bounded {
		p.Flags = append(p.Flags, FlagUnbounded)
	}
	return p, nil
}

// ResponseRatios returns A_x/A_is for each (analyte, internal standard)
// pair of readings. Preconditions: equal lengths ≥ 1, finite values, every
// A_is > 0; otherwise a *InputError naming the pair.
func ResponseRatios(analyte, is []float64) ([]float64, error) {
	if len(analyte) == 0 || len(analyte) != len(is) {
		return nil, inputErr("is_responses", "need one internal-standard response per analyte response, got %d and %d", len(analyte), len(is))
	}
	r := make([]float64, len(analyte))
	for i := range analyte {
		if math.IsNaN(analyte[i]) || math.IsInf(analyte[i], 0) {
			return nil, inputErr("responses["+strconv.Itoa(i)+"]", "must be finite, got %v", analyte[i])
		}
		if !(is[i] > 0) || math.IsInf(is[i], 0) {
			return nil, inputErr("is_responses["+strconv.Itoa(i)+"]", "internal-standard response must be finite and > 0, got %v", is[i])
		}
		r[i] = analyte[i] / is[i]
	}
	return r, nil
}

// appendFlags appends the flags of an undiluted estimate x0 against the
// working range: FlagBelowRange or FlagAboveRange with FlagExtrapolated, and
// FlagNegative.
func (r Range) appendFlags(flags []string, x0 float64) []string {
	switch {
	case x0 < r.Low:
		flags = append(flags, FlagBelowRange, FlagExtrapolated)
	case x0 > r.High:
		flags = append(flags, FlagAboveRange, FlagExtrapolated)
	}
	if x0 < 0 {
		flags = append(flags, FlagNegative)
	}
	return flags
}
