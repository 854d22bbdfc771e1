package calib

import (
	"math"
	"strconv"
	"testing"
)

// TestTextInt checks the short path of text.i against strconv.Itoa.
func TestTextInt(t *testing.T) {
	for _, v := range []int{0, 1, 9, 10, 42, 99, 100, 101, 999, 1000, 123456, -1, -9, -10, -100, math.MaxInt, math.MinInt} {
		tx := newText()
		if got, want := string(tx.i(v).b), strconv.Itoa(v); got != want {
			t.Errorf("text.i(%d) = %q, want %q", v, got, want)
		}
		tx.free()
	}
}
