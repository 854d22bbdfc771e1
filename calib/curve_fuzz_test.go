package calib

import (
	"encoding/binary"
	"math"
	"testing"
)

var curveModels = []Model{FourPL, FivePL, Power, ExpSaturation, ExpSaturationOffset}

// FuzzFitCurve fits every non-linear model to fuzzed readings (decoded as
// in FuzzFit), optionally weighted, from self-started or fuzzed starting
// values: never a panic, an error that is not an *InputError, a NaN or
// Inf in the result, or a hang (the iteration cap bounds the work).
func FuzzFitCurve(f *testing.F) {
	x, y, _ := elisaCurve()
	var seed []byte
	for i := range x {
		seed = append(seed, byte(x[i]*2), 0, 0, 0)
		binary.LittleEndian.PutUint16(seed[len(seed)-3:], uint16(int16(y[i]*64)))
	}
	for m := range curveModels {
		f.Add(seed, uint8(1), uint8(m), false, 0.0, 0.0)
		f.Add(seed, uint8(1), uint8(m), true, 1e6, -3.0)
	}
	f.Add([]byte{0, 0, 0, 0, 4, 64, 0, 0, 8, 128, 0, 0}, uint8(1), uint8(0), false, math.NaN(), 1e-300)
	f.Fuzz(func(t *testing.T, data []byte, mode, which uint8, weighted bool, s0, s1 float64) {
		m := curveModels[int(which)%len(curveModels)]
		pts := decodePoints(data, mode)
		if len(pts) > 64 {
			pts = pts[:64] // calibrations are small; the cap keeps each input fast
		}
		xs, ys := make([]float64, len(pts)), make([]float64, len(pts))
		var ws []float64
		for i, p := range pts {
			xs[i], ys[i] = p.X, p.Y
			if weighted {
				ws = append(ws, 1/(1+p.Y*p.Y))
			}
		}
		var start []float64
		if s0 != 0 || s1 != 0 {
			start = make([]float64, curveOf(m).NumParams())
			for j := range start {
				start[j] = math.NaN()
			}
			start[0], start[len(start)-1] = s0, s1
		}
		fit, err := FitCurve(xs, ys, ws, CurveOptions{Model: m, Start: start})
		checkOutcome(t, fit, err)
		if err == nil && fit.Outcome == Converged && fit.Covariance == nil {
			t.Fatalf("%s converged without a covariance", m)
		}
	})
}

// FuzzCurvePredict inverts fuzzed responses on a fitted curve of every
// model: never a panic, a NaN or Inf, or an interval with low > high.
func FuzzCurvePredict(f *testing.F) {
	x, y, w := elisaCurve()
	var fits []*CurveFit
	for _, m := range curveModels {
		fit, err := FitCurve(x, y, w, CurveOptions{Model: m})
		if err != nil || fit.Outcome != Converged {
			f.Fatalf("%s: %v %v", m, err, fit)
		}
		fits = append(fits, fit)
	}
	f.Add([]byte{0, 0, 0, 0, 0, 0, 0xf0, 0x3f}, 1.0, 1.0, 0.95, uint8(0), uint8(0))
	f.Add([]byte{1, 2, 3, 4, 0xff, 0x7f}, 0.5, 2.0, 0.0, uint8(3), uint8(1))
	f.Fuzz(func(t *testing.T, data []byte, w0, dilution, confidence float64, which, mode uint8) {
		fit := fits[int(which)%len(fits)]
		var ys []float64
		for len(data) >= 8 && mode%2 == 0 {
			ys = append(ys, math.Float64frombits(binary.LittleEndian.Uint64(data)))
			data = data[8:]
		}
		for len(data) >= 2 && mode%2 == 1 {
			ys = append(ys, float64(int16(binary.LittleEndian.Uint16(data)))/4096)
			data = data[2:]
		}
		p, err := fit.Predict(ys, w0, dilution, confidence)
		checkOutcome(t, p, err)
		if err == nil && p.Interval.Bounded && !(p.Interval.Low <= p.Interval.High) {
			t.Fatalf("interval %v", p.Interval)
		}
	})
}
