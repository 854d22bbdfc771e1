package sequence

import (
	"fmt"
	"strconv"

	"curvekeeper/calib"
)

// carryOver checks the blank injected right after the highest calibration
// standard (ICH M10 §3.2.6):
//
//	analyte: A(blank) ≤ CarryOverAnalytePct/100 · A(LLOQ)
//	IS:      A_is(blank) ≤ CarryOverISPct/100 · A_is(reference)
//
// A(LLOQ) is cfg.LLOQResponse or the mean response of the lowest non-zero
// standard; A_is(reference) is cfg.ISReference or the mean IS response of
// the standards. The IS part is evaluated only when the method has an
// internal standard (a reference > 0). Not evaluated when the injection
// after the highest standard is not a blank.
func carryOver(inj []Injection, cfg Config) CarryOver {
	co := CarryOver{Source: "ICH M10 §3.2.6: analyte ≤ " + strconv.FormatFloat(cfg.CarryOverAnalytePct, 'g', -1, 64) +
		" % of the LLOQ response, IS ≤ " + strconv.FormatFloat(cfg.CarryOverISPct, 'g', -1, 64) + " % of the IS response"}
	hi, lowest := -1, 0.0
	var isSum float64
	var isN int
	for i, in := range inj {
		if in.Kind != CalibrationStandard || !(in.Nominal > 0) {
			continue
		}
		if hi < 0 || in.Nominal >= inj[hi].Nominal {
			hi = i
		}
		if lowest == 0 || in.Nominal < lowest {
			lowest = in.Nominal
		}
		if in.ISResponse > 0 {
			isSum += in.ISResponse
			isN++
		}
	}
	if hi < 0 {
		co.Detail = "no non-zero calibration standard in the sequence"
		return co
	}
	co.HighestStandard = inj[hi].Position
	if hi+1 >= len(inj) || !isBlank(inj[hi+1].Kind) {
		co.Detail = fmt.Sprintf("no blank directly follows the highest standard at position %d: carry-over not evaluated", co.HighestStandard)
		return co
	}
	b := inj[hi+1]
	lloq := cfg.LLOQResponse
	if lloq == 0 {
		var sum float64
		var n int
		for _, in := range inj {
			if in.Kind == CalibrationStandard && in.Nominal == lowest {
				sum += in.Response
				n++
			}
		}
		lloq = sum / float64(n)
	}
	if !(lloq > 0) {
		co.Detail = "the LLOQ response is not > 0: carry-over not evaluated"
		return co
	}
	co.Evaluated, co.BlankPosition = true, b.Position
	co.AnalyteResponse = b.Response
	co.AnalyteLimit = cfg.CarryOverAnalytePct / 100 * lloq
	co.AnalytePct = 100 * b.Response / lloq
	co.AnalytePassed = b.Response <= co.AnalyteLimit
	co.Passed = co.AnalytePassed
	co.Detail = fmt.Sprintf("blank at position %d after the highest standard at position %d: analyte %g is %s of the LLOQ response %g (limit %g %%)",
		b.Position, co.HighestStandard, b.Response, pct(co.AnalytePct), lloq, cfg.CarryOverAnalytePct)
	ref := cfg.ISReference
	if ref == 0 && isN > 0 {
		ref = isSum / float64(isN)
	}
	if ref > 0 {
		co.ISEvaluated = true
		co.ISResponse = b.ISResponse
		co.ISLimit = cfg.CarryOverISPct / 100 * ref
		co.ISPct = 100 * b.ISResponse / ref
		co.ISPassed = b.ISResponse <= co.ISLimit
		co.Passed = co.Passed && co.ISPassed
		co.Detail += fmt.Sprintf("; IS %g is %s of the IS response %g (limit %g %%)", b.ISResponse, pct(co.ISPct), ref, cfg.CarryOverISPct)
	}
	return co
}

func isBlank(k Kind) bool { return k == CalibrationBlank || k == MethodBlank || k == CCB }

// applyBlank applies the blank-subtraction policy to every sample result:
// none, or the mean result of the sequence's method blanks (the batch's),
// and states what was done.
func applyBlank(ev *Evaluation, inj []Injection, cfg Config) {
	bc := BlankCorrection{Policy: cfg.BlankSubtraction}
	switch cfg.BlankSubtraction {
	case SubtractMeanMethodBlank:
		var sum float64
		for _, in := range inj {
			if in.Kind == MethodBlank {
				sum += in.Result
				bc.Blanks++
			}
		}
		if bc.Blanks == 0 {
			bc.Statement = "the method subtracts the mean of the batch's method blanks, but the batch has none: nothing was subtracted"
			break
		}
		bc.Value, bc.Applied = sum/float64(bc.Blanks), true
		bc.Statement = fmt.Sprintf("the mean of the batch's %d method blank(s), %g, was subtracted from every sample result", bc.Blanks, bc.Value)
	default:
		bc.Statement = "no blank subtraction: results are reported as measured"
	}
	for k := range ev.Samples {
		s := &ev.Samples[k]
		s.Blank, s.Net = bc.Value, s.Result-bc.Value
	}
	ev.Blank = bc
}

// checkIS checks each sample's internal-standard response against the mean
// IS response of the calibration standards (calib.ISRecovery), when the
// standards carry IS responses; a sample outside the window gets a note,
// and its state is left to the reviewer.
func checkIS(ev *Evaluation, inj []Injection, w calib.ISWindow) error {
	var cal []float64
	for _, in := range inj {
		if in.Kind == CalibrationStandard && in.ISResponse > 0 {
			cal = append(cal, in.ISResponse)
		}
	}
	if len(cal) == 0 {
		return nil
	}
	byPos := make(map[int]float64, len(inj))
	for _, in := range inj {
		byPos[in.Position] = in.ISResponse
	}
	for k := range ev.Samples {
		s := &ev.Samples[k]
		is := byPos[s.Position]
		if is == 0 {
			continue
		}
		c, _, err := calib.ISRecovery(cal, []float64{is}, w)
		if err != nil {
			return inputErr("config.is_window", "%v", err)
		}
		s.IS, s.HasIS = c[0], true
		if !c[0].Passed {
			s.Notes = append(s.Notes, c[0].Detail)
		}
	}
	return nil
}
