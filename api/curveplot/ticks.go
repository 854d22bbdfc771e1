package curveplot

import (
	"math"
	"strconv"

	"gonum.org/v1/plot"

	"curvekeeper/calib"
)

// niceTicks places about n major ticks at 1, 2 or 5 × 10^k steps with
// plain labels ("25", not "25.00") and a minor tick between each pair
// (Heckbert, "Nice numbers for graph labels", Graphics Gems, 1990).
type niceTicks struct{ n int }

func (t niceTicks) Ticks(lo, hi float64) []plot.Tick {
	if !calib.Finite(lo) || !calib.Finite(hi) || hi <= lo {
		return nil
	}
	n := max(t.n, 2)
	step := niceStep((hi - lo) / float64(n-1))
	if !calib.Finite(step) || step <= 0 {
		return nil
	}
	first := math.Ceil(lo/step) * step
	dec := max(0, -int(math.Floor(math.Log10(step)+1e-9)))
	format, prec := byte('f'), dec
	if mag := math.Max(math.Abs(lo), math.Abs(hi)); mag >= 1e6 || (mag < 1e-3 && mag > 0) {
		format, prec = 'g', 3
	}
	var ticks []plot.Tick
	for i := 0; i < 1000; i++ {
		v := first + float64(i)*step
		if v > hi+step*1e-9 {
			break
		}
		if math.Abs(v) < step*1e-9 {
			v = 0
		}
		ticks = append(ticks, plot.Tick{Value: v, Label: strconv.FormatFloat(v, format, prec, 64)})
		if m := v + step/2; m <= hi {
			ticks = append(ticks, plot.Tick{Value: m})
		}
	}
	if m := first - step/2; m >= lo {
		ticks = append(ticks, plot.Tick{Value: m})
	}
	return ticks
}

// niceStep rounds a raw step up to 1, 2 or 5 × 10^k.
func niceStep(raw float64) float64 {
	p := math.Pow(10, math.Floor(math.Log10(raw)))
	switch f := raw / p; {
	case f <= 1:
		return p
	case f <= 2:
		return 2 * p
	case f <= 5:
		return 5 * p
	}
	return 10 * p
}
