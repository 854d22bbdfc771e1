package curveplot

import (
	"fmt"
	"strconv"
	"strings"

	"curvekeeper/calib"
)

// AltText returns a one-paragraph text alternative for the figure Curve
// draws of r: the model and weighting, the equation with coefficients to 4
// significant figures, R², the number of standard readings and levels and
// how many were excluded, the working range, the verdict, and the caution
// that a qualified person reviews the result.
func AltText(r *calib.Report, analyte, unit string) string {
	if r == nil {
		return "Calibration figure: no report."
	}
	var b strings.Builder
	b.WriteString("Calibration curve")
	if analyte != "" {
		b.WriteString(" for " + analyte)
	}
	if unit != "" {
		b.WriteString(", concentration in " + unit)
	}
	b.WriteString(". ")

	n, excl := len(r.Points), 0
	levels := map[string]bool{}
	for _, p := range r.Points {
		if p.Excluded {
			excl++
		}
		levels[p.Level] = true
	}
	c, fitted, err := newCurve(r)
	switch {
	case err != nil:
		fmt.Fprintf(&b, "The report cannot be drawn: %v. ", err)
	case !fitted:
		b.WriteString("No curve could be fitted. ")
	default:
		fmt.Fprintf(&b, "Model %s", modelName(r.Model))
		if r.Weighting != "" {
			fmt.Fprintf(&b, ", weighting %s", r.Weighting)
		}
		fmt.Fprintf(&b, ": %s", equation(c))
		if calib.Finite(r.RSquared) {
			fmt.Fprintf(&b, ", R² = %s", sig4(r.RSquared))
		}
		b.WriteString(". ")
	}
	fmt.Fprintf(&b, "%s of standards at %s", plural(n, "reading"), plural(len(levels), "level"))
	if excl > 0 {
		fmt.Fprintf(&b, ", %d excluded from the fit", excl)
	} else {
		b.WriteString(", none excluded")
	}
	b.WriteString(". ")
	if fitted && calib.Finite(r.Range.Low) && calib.Finite(r.Range.High) && r.Range.High > r.Range.Low {
		fmt.Fprintf(&b, "Working range %s to %s%s. ", sig4(r.Range.Low), sig4(r.Range.High), withUnit(unit))
	}
	if fitted && r.Confidence > 0 && r.Confidence < 1 {
		fmt.Fprintf(&b, "The shaded band is the %s%% confidence band of the mean; the lower panel shows studentised residuals with guides at ±2 and ±3. ",
			strconv.FormatFloat(100*r.Confidence, 'g', 4, 64))
	}
	if r.Verdict != "" {
		failed := 0
		for _, ch := range r.Checks {
			if ch.Mandatory && !ch.Passed {
				failed++
			}
		}
		fmt.Fprintf(&b, "Verdict: %s", r.Verdict)
		if failed > 0 {
			fmt.Fprintf(&b, " (%s failed)", plural(failed, "mandatory check"))
		}
		b.WriteString(". ")
	}
	b.WriteString(Footer)
	return b.String()
}

// equation writes ŷ = f(x)ᵀβ with coefficients to 4 significant figures.
func equation(c curve) string {
	if names := calib.ParameterNames(c.model); names != nil {
		var b strings.Builder
		b.WriteString(calib.Equation(c.model))
		for i, n := range names {
			sep := ", "
			if i == 0 {
				sep = " with "
			}
			b.WriteString(sep + n + " = " + sig4(c.coef[i]))
		}
		return b.String()
	}
	terms := calib.Terms(c.model)
	if c.model == calib.LinearOrigin || c.model == calib.AverageRF {
		return "y = " + signed(c.coef[0]) + terms[0]
	}
	var b strings.Builder
	b.WriteString("y = " + signed(c.coef[0]))
	for i := 1; i < len(terms); i++ {
		v := c.coef[i]
		if v < 0 {
			b.WriteString(" − " + sig4(-v) + terms[i])
		} else {
			b.WriteString(" + " + sig4(v) + terms[i])
		}
	}
	return b.String()
}

func sig4(v float64) string { return strconv.FormatFloat(v, 'g', 4, 64) }

// signed is sig4 with a true minus sign (U+2212), as in the other terms.
func signed(v float64) string {
	if v < 0 {
		return "−" + sig4(-v)
	}
	return sig4(v)
}

func withUnit(unit string) string {
	if unit == "" {
		return ""
	}
	return " " + unit
}

func plural(n int, word string) string {
	if n == 1 {
		return "1 " + word
	}
	return strconv.Itoa(n) + " " + word + "s"
}
