package calib

import (
	"math"
	"strconv"
)

// pow10s holds 10^k for k = 0..22, every one exact in float64.
var pow10s = [...]float64{1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10,
	1e11, 1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22}

// appendG6 appends v as strconv.AppendFloat(dst, v, 'g', 6, 64) does, byte
// for byte. The Detail texts format a dozen numbers per fit, and strconv's
// exact fixed-precision conversion costs more than the arithmetic of most
// checks; this short path handles the usual magnitudes and leaves the rest
// to strconv.
//
// The six significant digits are the nearest integer D to s = |v|·10^(5−E)
// with s in [10⁵, 10⁶): 10^|5−E| is exact for |5−E| ≤ 22, so s carries one
// rounding error, below 10⁶·2⁻⁵³ ≈ 1.2e−10. Rounding s gives the digits of
// the exact value unless s lies within that error of a half-integer, where
// the exact value could round the other way (or be a tie, which strconv
// rounds to even); the path hands those to strconv, with a wide margin. An s
// that lands beside 10⁵ or 10⁶ on the wrong side of the exact value is
// within the error of an integer, where both choices of E give the same
// digits. The digits are then laid out by strconv's rules for %g with
// precision 6: %e when the exponent is below −4 or at least the precision,
// else %f, trailing zeros dropped.
func appendG6(dst []byte, v float64) []byte {
	a := math.Abs(v)
	if !(a >= 1e-15 && a < 1e20) { // zero, tiny, huge, NaN, ±Inf
		return strconv.AppendFloat(dst, v, 'g', 6, 64)
	}
	// E ≈ ⌊log10 a⌋ from the binary exponent (⌊e2·log10 2⌋, off by at most one).
	e2 := int(math.Float64bits(a)>>52&0x7ff) - 1023
	e10 := (e2 * 78913) >> 18
	s := scale10(a, 5-e10)
	if s >= 1e6 {
		e10++
		s = scale10(a, 5-e10)
	} else if s < 1e5 {
		e10--
		s = scale10(a, 5-e10)
	}
	if !(s >= 1e5 && s < 1e6) {
		return strconv.AppendFloat(dst, v, 'g', 6, 64)
	}
	fl := math.Floor(s)
	f := s - fl // exact: s < 2⁵²
	if math.Abs(f-0.5) < 1e-6 {
		return strconv.AppendFloat(dst, v, 'g', 6, 64)
	}
	d := int(fl)
	if f > 0.5 {
		d++
	}
	if d == 1e6 {
		d = 1e5
		e10++
	}
	// The six digits, two at a time.
	var digs [6]byte
	lo, mid, hi := d%100, d/100%100, d/10000
	digs[0], digs[1] = digitPairs[2*hi], digitPairs[2*hi+1]
	digs[2], digs[3] = digitPairs[2*mid], digitPairs[2*mid+1]
	digs[4], digs[5] = digitPairs[2*lo], digitPairs[2*lo+1]
	nd := 6
	for nd > 1 && digs[nd-1] == '0' {
		nd--
	}
	dp := e10 + 1 // position of the decimal point relative to the digits
	// The text is laid out in out and appended at once; it is at most
	// "-0.0000123456" or "-1.23456e+19" long.
	var out [16]byte
	n := 0
	if v < 0 {
		out[0] = '-'
		n = 1
	}
	eprec := 6
	if eprec > nd && nd >= dp {
		eprec = nd
	}
	if exp := dp - 1; exp < -4 || exp >= eprec {
		// %e with nd−1 digits after the point.
		out[n] = digs[0]
		n++
		if nd > 1 {
			out[n] = '.'
			n++
			n += copy(out[n:], digs[1:nd])
		}
		out[n] = 'e'
		if exp < 0 {
			out[n+1] = '-'
			exp = -exp
		} else {
			out[n+1] = '+'
		}
		out[n+2], out[n+3] = digitPairs[2*exp], digitPairs[2*exp+1] // exp ≤ 20
		return append(dst, out[:n+4]...)
	}
	// %f with max(nd−dp, 0) digits after the point.
	if dp > 0 {
		m := min(nd, dp)
		n += copy(out[n:], digs[:m])
		for ; m < dp; m++ {
			out[n] = '0'
			n++
		}
	} else {
		out[n] = '0'
		n++
	}
	if nd > dp {
		out[n] = '.'
		n++
		for j := dp; j < 0; j++ {
			out[n] = '0'
			n++
		}
		n += copy(out[n:], digs[max(dp, 0):nd])
	}
	return append(dst, out[:n]...)
}

// digitPairs holds "00" to "99".
const digitPairs = "00010203040506070809" +
	"10111213141516171819" +
	"20212223242526272829" +
	"30313233343536373839" +
	"40414243444546474849" +
	"50515253545556575859" +
	"60616263646566676869" +
	"70717273747576777879" +
	"80818283848586878889" +
	"90919293949596979899"

// scale10 returns a·10^k rounded once (|k| ≤ 22: the power is exact).
func scale10(a float64, k int) float64 {
	if k >= 0 {
		return a * pow10s[k]
	}
	return a / pow10s[-k]
}
