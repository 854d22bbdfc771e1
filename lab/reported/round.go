package reported

import (
	"fmt"
	"math"
	"strconv"
	"strings"
)

// RoundMode is how a tie (a dropped part of exactly one half) is rounded.
type RoundMode string

// The rounding modes.
const (
	// HalfEven rounds a tie to the even neighbour: 2.665 → 2.66, 2.675 →
	// 2.68. The default: over many results ties go up and down equally
	// often, so rounding adds no bias to averages and trends (the rule of
	// ISO 80000-1 Annex B and ASTM E29, from memory).
	HalfEven RoundMode = "half_even"
	// HalfAwayFromZero rounds a tie away from zero: 2.665 → 2.67, the
	// schoolbook rule some methods and LIMS prescribe.
	HalfAwayFromZero RoundMode = "half_away_from_zero"
)

// Rounding is a method's rule for printed results. Zero values: 3
// significant figures, HalfEven.
type Rounding struct {
	SignificantFigures int // > 0: this many significant figures
	Decimals           int // with SignificantFigures 0 and UseDecimals: this many decimals (≥ 0)
	UseDecimals        bool
	Mode               RoundMode
}

// DefaultSignificantFigures is the default precision of a printed result.
const DefaultSignificantFigures = 3

// guardDigits is the precision a value is first taken to, so that the
// binary noise of a product of factors (12.36·10·100/0.8·0.001 =
// 15.450000000000001) does not decide a tie: no measurement carries twelve
// significant figures.
const guardDigits = 12

func (r *Rounding) normalise() error {
	if r.Mode == "" {
		r.Mode = HalfEven
	}
	if r.Mode != HalfEven && r.Mode != HalfAwayFromZero {
		return fmt.Errorf("rounding mode must be %q or %q, got %q", HalfEven, HalfAwayFromZero, r.Mode)
	}
	switch {
	case r.SignificantFigures < 0 || r.SignificantFigures > guardDigits:
		return fmt.Errorf("significant figures must lie between 1 and %d, got %d", guardDigits, r.SignificantFigures)
	case r.SignificantFigures > 0 && r.UseDecimals:
		return fmt.Errorf("give significant figures or decimals, not both")
	case r.UseDecimals && (r.Decimals < 0 || r.Decimals > 15):
		return fmt.Errorf("decimals must lie between 0 and 15, got %d", r.Decimals)
	case r.SignificantFigures == 0 && !r.UseDecimals:
		r.SignificantFigures = DefaultSignificantFigures
	}
	return nil
}

func (r Rounding) String() string {
	mode := "round half to even"
	if r.Mode == HalfAwayFromZero {
		mode = "round half away from zero"
	}
	if r.UseDecimals {
		return fmt.Sprintf("%d decimals, %s", r.Decimals, mode)
	}
	return fmt.Sprintf("%d significant figures, %s", r.SignificantFigures, mode)
}

// Round rounds v as the rule says, in decimal: v is first taken to 12
// significant digits, then its decimal digits are cut at the rule's place
// and a tie is settled by the mode. It returns the printed text (trailing
// zeros kept: 4.80 to three figures) and its value.
func (r Rounding) Round(v float64) (string, float64, error) {
	if err := r.normalise(); err != nil {
		return "", 0, err
	}
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return "", 0, fmt.Errorf("value must be finite, got %v", v)
	}
	neg := v < 0
	s := strconv.FormatFloat(math.Abs(v), 'e', guardDigits-1, 64) // d.ddddddddddde±XX
	mant, expText, _ := strings.Cut(s, "e")
	exp, _ := strconv.Atoi(expText)
	digits := strings.TrimRight(strings.Replace(mant, ".", "", 1), "0")
	if digits == "" { // v == 0
		digits, exp = "0", 0
	}
	// digits d1d2… stand for 0.d1d2… × 10^(exp+1); keep n of them.
	n := r.SignificantFigures
	if r.UseDecimals {
		n = exp + 1 + r.Decimals
	}
	kept, up := cut(digits, n, r.Mode)
	if up {
		var carry bool
		kept, carry = increment(kept)
		if carry {
			exp++
			if !r.UseDecimals {
				kept = kept[:len(kept)-1]
			}
		}
	}
	// kept (len k) stands for the integer K × 10^(exp+1−k).
	decimals := max(0, len(kept)-(exp+1)) // 12345 to three figures prints 12300
	if r.UseDecimals {
		decimals = r.Decimals
	}
	text := place(kept, exp+1, decimals)
	if neg && strings.Trim(text, "0.") != "" {
		text = "-" + text
	}
	val, err := strconv.ParseFloat(text, 64)
	if err != nil {
		return "", 0, err
	}
	return text, val, nil
}

// cut keeps the first n digits (n may be ≤ 0: nothing kept) and says
// whether the dropped part rounds the kept part up.
func cut(digits string, n int, mode RoundMode) (string, bool) {
	if n >= len(digits) {
		return digits + strings.Repeat("0", n-len(digits)), false
	}
	if n < 0 {
		return "", false
	}
	kept, dropped := digits[:n], digits[n:]
	switch {
	case dropped[0] > '5':
		return kept, true
	case dropped[0] < '5':
		return kept, false
	case strings.Trim(dropped[1:], "0") != "":
		return kept, true
	case mode == HalfAwayFromZero:
		return kept, true
	default: // a tie, half to even
		return kept, kept != "" && (kept[len(kept)-1]-'0')%2 == 1
	}
}

// increment adds one unit in the last place of a digit string; carry says
// the string grew by a leading 1.
func increment(d string) (string, bool) {
	b := []byte(d)
	for i := len(b) - 1; i >= 0; i-- {
		if b[i] < '9' {
			b[i]++
			return string(b), false
		}
		b[i] = '0'
	}
	return "1" + string(b), true
}

// place writes the digits kept, whose first stands at 10^(intDigits−1), with
// the given number of decimals.
func place(kept string, intDigits, decimals int) string {
	// All digits, as an integer string scaled by 10^decimals.
	var whole string
	switch shift := decimals - (len(kept) - intDigits); {
	case shift >= 0:
		whole = kept + strings.Repeat("0", shift)
	case len(kept)+shift > 0:
		whole = kept[:len(kept)+shift]
	}
	whole = strings.TrimLeft(whole, "0")
	if len(whole) <= decimals {
		whole = strings.Repeat("0", decimals-len(whole)+1) + whole
	}
	if whole == "" {
		whole = "0"
	}
	if decimals == 0 {
		return whole
	}
	return whole[:len(whole)-decimals] + "." + whole[len(whole)-decimals:]
}
