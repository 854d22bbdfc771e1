package calib

import (
	"encoding/binary"
	"errors"
	"math"
	"testing"
)

var (
	fuzzModels     = []Model{Linear, LinearOrigin, Quadratic}
	fuzzWeightings = Weightings()
)

// decodePoints turns fuzz bytes into points. Mode 0 reads raw float64 bits
// (NaN, Inf, subnormals, huge values); mode 1 reads small scaled integers,
// which give plausible calibrations with ties, zeros and replicates.
func decodePoints(data []byte, mode uint8) []Point {
	var pts []Point
	if mode%2 == 0 {
		for len(data) >= 17 {
			x := math.Float64frombits(binary.LittleEndian.Uint64(data))
			y := math.Float64frombits(binary.LittleEndian.Uint64(data[8:]))
			pts = append(pts, Point{X: x, Y: y, Excluded: data[16]&1 == 1})
			data = data[17:]
		}
		return pts
	}
	for len(data) >= 4 {
		x := float64(data[0]) / 4
		y := float64(int16(binary.LittleEndian.Uint16(data[1:]))) / 64
		pts = append(pts, Point{Level: "L" + itoa(int(data[0])), X: x, Y: y, Excluded: data[3] == 0xff})
		data = data[4:]
	}
	return pts
}

// checkOutcome fails unless err is an *InputError or every float of v is
// finite.
func checkOutcome(t *testing.T, v any, err error) {
	t.Helper()
	if err != nil {
		var ie *InputError
		if !errors.As(err, &ie) {
			t.Fatalf("error is not an *InputError: %v", err)
		}
		return
	}
	assertFinite(t, v)
}

func FuzzFit(f *testing.F) {
	seed := func(pts []Point, mode uint8) []byte {
		var b []byte
		for _, p := range pts {
			if mode == 0 {
				b = binary.LittleEndian.AppendUint64(b, math.Float64bits(p.X))
				b = binary.LittleEndian.AppendUint64(b, math.Float64bits(p.Y))
				b = append(b, 0)
			} else {
				b = append(b, byte(4*p.X))
				b = binary.LittleEndian.AppendUint16(b, uint16(int16(64*p.Y)))
				b = append(b, 0)
			}
		}
		return b
	}
	f.Add(seed(photometerPoints(), 0), uint8(0), uint8(2), uint8(0))
	f.Add(seed(curvedPoints()[:12], 1), uint8(2), uint8(6), uint8(1))
	f.Fuzz(func(t *testing.T, data []byte, model, weighting, mode uint8) {
		pts := decodePoints(data, mode)
		opt := Options{Model: fuzzModels[int(model)%len(fuzzModels)], Weighting: fuzzWeightings[int(weighting)%len(fuzzWeightings)]}
		r, err := Fit(pts, opt)
		checkOutcome(t, r, err)
		if err != nil {
			assertFinite(t, FailedReport(pts, opt, err))
			return
		}
		if r.Verdict != "pass" && r.Verdict != "fail" {
			t.Fatalf("verdict %q", r.Verdict)
		}
		for _, p := range pts {
			pr, err := r.Predict([]float64{p.Y}, 0, 0)
			checkOutcome(t, pr, err)
		}
	})
}

func FuzzPredict(f *testing.F) {
	reports := []*Report{
		mustFit(photometerPoints(), Options{Weighting: WeightInvX2}),
		mustFit(photometerPoints(), Options{Model: LinearOrigin, Weighting: WeightInvS2}),
		mustFit(curvedPoints(), Options{Model: Quadratic, Weighting: WeightInvY}),
		mustFit(curvedPoints(), Options{Model: Quadratic}),
		mustFit([]Point{{X: 1, Y: 1.0}, {X: 2, Y: 1.3}, {X: 3, Y: 0.8}, {X: 4, Y: 1.2}}, Options{}),
	}
	f.Add([]byte{0, 0, 0, 0, 0, 0, 0xe0, 0x3f}, 1.0, 0.95, uint8(0), uint8(0))
	f.Add([]byte{1, 2, 3, 4}, 0.0, 0.0, uint8(2), uint8(1))
	f.Fuzz(func(t *testing.T, data []byte, dilution, confidence float64, which, mode uint8) {
		r := reports[int(which)%len(reports)]
		var ys []float64
		if mode%2 == 0 {
			for len(data) >= 8 {
				ys = append(ys, math.Float64frombits(binary.LittleEndian.Uint64(data)))
				data = data[8:]
			}
		} else {
			for len(data) >= 2 {
				ys = append(ys, float64(int16(binary.LittleEndian.Uint16(data)))/64)
				data = data[2:]
			}
		}
		p, err := r.Predict(ys, dilution, confidence)
		checkOutcome(t, p, err)
		if err == nil && p.Interval.Bounded && !(p.Interval.Low <= p.Interval.High) {
			t.Fatalf("interval %v", p.Interval)
		}
	})
}

func mustFit(pts []Point, opt Options) *Report {
	r, err := Fit(pts, opt)
	if err != nil {
		panic(err)
	}
	return r
}
