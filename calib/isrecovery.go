package calib

import (
	"math"
	"strconv"
)

// The default window of internal-standard recovery, in percent of the mean
// IS response of the calibrators: 60–125 %, common ICP-MS practice ([M],
// confirm per method). Each method sets its own.
const (
	DefaultISWindowLowPct  = 60
	DefaultISWindowHighPct = 125
)

// ISWindowSource names where the default window comes from.
const ISWindowSource = "internal-standard recovery 60–125 % of the calibrators' mean IS response: common ICP-MS practice (from memory); the method's own window overrides it"

// ISWindow is the accepted internal-standard recovery, in percent. Zero
// values take the defaults.
type ISWindow struct {
	LowPct  float64
	HighPct float64
}

// ISCheck is the internal-standard check of one sample.
type ISCheck struct {
	Response    float64 // the sample's IS response
	RecoveryPct float64 // 100·response/mean calibrator IS response
	LowPct      float64
	HighPct     float64
	Passed      bool
	Detail      string
}

// ISRecovery checks each sample's internal-standard response against the
// mean IS response of the calibrators:
//
//	recovery = 100·A_is(sample)/mean(A_is(calibrators)),  passed ⇔ low ≤ recovery ≤ high
//
// (FIELD-NOTES §8; FDA's 2019 Q&A on IS response variability names drifting
// and shifted IS responses). Outside the window the sample's result is
// suspect. Preconditions: at least one calibrator response, every response
// finite and ≥ 0 with a calibrator mean > 0, 0 ≤ low < high; otherwise a
// *InputError.
func ISRecovery(calibratorIS, sampleIS []float64, w ISWindow) ([]ISCheck, float64, error) {
	if w.LowPct == 0 && w.HighPct == 0 {
		w = ISWindow{DefaultISWindowLowPct, DefaultISWindowHighPct}
	}
	if math.IsNaN(w.LowPct) || math.IsNaN(w.HighPct) || math.IsInf(w.HighPct, 0) || w.LowPct < 0 || !(w.LowPct < w.HighPct) {
		return nil, 0, inputErr("is_window", "need 0 ≤ low < high, finite, got %v–%v %%", w.LowPct, w.HighPct)
	}
	if len(calibratorIS) == 0 {
		return nil, 0, inputErr("calibrator_is", "no calibrator IS responses")
	}
	var mean float64
	for i, v := range calibratorIS {
		if math.IsNaN(v) || math.IsInf(v, 0) || v < 0 {
			return nil, 0, inputErr("calibrator_is["+strconv.Itoa(i)+"]", "must be finite and ≥ 0, got %v", v)
		}
		mean += v
	}
	mean /= float64(len(calibratorIS))
	if !(mean > 0) {
		return nil, 0, inputErr("calibrator_is", "mean IS response of the calibrators must be > 0")
	}
	out := make([]ISCheck, len(sampleIS))
	for i, v := range sampleIS {
		if math.IsNaN(v) || math.IsInf(v, 0) || v < 0 {
			return nil, 0, inputErr("sample_is["+strconv.Itoa(i)+"]", "must be finite and ≥ 0, got %v", v)
		}
		rec := 100 * v / mean
		c := ISCheck{Response: v, RecoveryPct: rec, LowPct: w.LowPct, HighPct: w.HighPct, Passed: rec >= w.LowPct && rec <= w.HighPct}
		window := strconv.FormatFloat(w.LowPct, 'g', -1, 64) + "–" + strconv.FormatFloat(w.HighPct, 'g', -1, 64) + " %"
		if c.Passed {
			c.Detail = "IS recovery " + strconv.FormatFloat(rec, 'f', 1, 64) + " % within " + window
		} else {
			c.Detail = "IS recovery " + strconv.FormatFloat(rec, 'f', 1, 64) + " % outside " + window + ": the result is suspect"
		}
		out[i] = c
	}
	return out, mean, nil
}
