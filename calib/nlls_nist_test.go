package calib

import (
	"math"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
)

// nistNL is one NIST StRD nonlinear dataset with its starting values and
// certified values parsed from its own header (never retyped).
type nistNL struct {
	starts   [2][]float64
	params   []float64
	paramSDs []float64
	ssr      float64
	residSD  float64
	df       int
	x, y     []float64
}

var (
	reNLStart = regexp.MustCompile(`^\s*b(\d+)\s*=\s*(\S+)\s+(\S+)\s+(\S+)\s+(\S+)\s*$`)
	reNLSSR   = regexp.MustCompile(`^\s*Residual Sum of Squares:\s+(\S+)\s*$`)
	reNLSD    = regexp.MustCompile(`^\s*Residual Standard Deviation:\s+(\S+)\s*$`)
	reNLDF    = regexp.MustCompile(`^\s*Degrees of Freedom:\s+(\d+)\s*$`)
)

// readNISTNonlinear parses testdata/nist/nonlinear/<name> (CRLF; header in
// lines 1–60 with "Data (lines a to b)", the b-lines giving Start 1,
// Start 2, the certified value and its SD; data rows y then x).
func readNISTNonlinear(t *testing.T, name string) nistNL {
	t.Helper()
	raw, err := os.ReadFile(filepath.Join("..", "testdata", "nist", "nonlinear", name))
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.ReplaceAll(string(raw), "\r\n", "\n"), "\n")
	var d nistNL
	first, last := 0, 0
	for i, ln := range lines {
		if i >= 60 {
			break
		}
		if m := reDataLines.FindStringSubmatch(strings.Join(strings.Fields(ln), " ")); m != nil && first == 0 {
			first, _ = strconv.Atoi(m[1])
			last, _ = strconv.Atoi(m[2])
		}
		if m := reNLStart.FindStringSubmatch(ln); m != nil {
			if j, _ := strconv.Atoi(m[1]); j != len(d.params)+1 {
				t.Fatalf("%s: parameter b%s out of order", name, m[1])
			}
			d.starts[0] = append(d.starts[0], mustFloat(t, m[2]))
			d.starts[1] = append(d.starts[1], mustFloat(t, m[3]))
			d.params = append(d.params, mustFloat(t, m[4]))
			d.paramSDs = append(d.paramSDs, mustFloat(t, m[5]))
		}
		if m := reNLSSR.FindStringSubmatch(ln); m != nil {
			d.ssr = mustFloat(t, m[1])
		}
		if m := reNLSD.FindStringSubmatch(ln); m != nil {
			d.residSD = mustFloat(t, m[1])
		}
		if m := reNLDF.FindStringSubmatch(ln); m != nil {
			d.df, _ = strconv.Atoi(m[1])
		}
	}
	if first == 0 || len(d.params) == 0 || d.ssr == 0 || d.residSD == 0 || d.df == 0 {
		t.Fatalf("%s: header not parsed (data %d–%d, %d params, SS %v, sd %v, df %d)", name, first, last, len(d.params), d.ssr, d.residSD, d.df)
	}
	for i := first - 1; i < last; i++ {
		f := strings.Fields(lines[i])
		if len(f) != 2 {
			t.Fatalf("%s line %d: %q", name, i+1, lines[i])
		}
		d.y = append(d.y, mustFloat(t, f[0]))
		d.x = append(d.x, mustFloat(t, f[1]))
	}
	if len(d.x)-len(d.params) != d.df {
		t.Fatalf("%s: %d data rows and %d parameters, header says %d degrees of freedom", name, len(d.x), len(d.params), d.df)
	}
	return d
}

// funcCurve is a test-only Curve from a function that fills the gradient.
type funcCurve struct {
	p int
	f func(x float64, b, g []float64) float64
}

func (c funcCurve) NumParams() int { return c.p }
func (c funcCurve) Eval(x float64, b, g []float64) float64 {
	if g == nil {
		g = make([]float64, c.p) // test models: simplicity over speed
	}
	return c.f(x, b, g)
}

// expRise is y = b1·(1 − exp(−b2·x)) (NIST Misra1a, BoxBOD).
var expRise = funcCurve{2, func(x float64, b, g []float64) float64 {
	e := math.Exp(-b[1] * x)
	g[0], g[1] = 1-e, b[0]*x*e
	return b[0] * (1 - e)
}}

// nistModels are the models of the StRD files as their headers state them,
// each with its analytic Jacobian.
var nistModels = map[string]funcCurve{
	"Misra1a.dat": expRise,
	"BoxBOD.dat":  expRise,
	"Chwirut2.dat": {3, func(x float64, b, g []float64) float64 { // exp(−b1·x)/(b2 + b3·x)
		e, q := math.Exp(-b[0]*x), b[1]+b[2]*x
		g[0], g[1], g[2] = -x*e/q, -e/(q*q), -x*e/(q*q)
		return e / q
	}},
	"DanWood.dat": {2, func(x float64, b, g []float64) float64 { // b1·x^b2
		v := math.Pow(x, b[1])
		g[0], g[1] = v, b[0]*v*math.Log(x)
		return b[0] * v
	}},
	"MGH10.dat": {3, func(x float64, b, g []float64) float64 { // b1·exp(b2/(x + b3))
		q := x + b[2]
		e := math.Exp(b[1] / q)
		g[0], g[1], g[2] = e, b[0]*e/q, -b[0]*e*b[1]/(q*q)
		return b[0] * e
	}},
	"Eckerle4.dat": {3, func(x float64, b, g []float64) float64 { // (b1/b2)·exp(−½((x − b3)/b2)²)
		u := (x - b[2]) / b[1]
		e := math.Exp(-0.5 * u * u)
		f := b[0] / b[1] * e
		g[0], g[1], g[2] = e/b[1], f*(u*u-1)/b[1], f*u/b[1]
		return f
	}},
	"Rat42.dat": {3, func(x float64, b, g []float64) float64 { // b1/(1 + exp(b2 − b3·x))
		e := math.Exp(b[1] - b[2]*x)
		q := 1 + e
		g[0], g[1], g[2] = 1/q, -b[0]*e/(q*q), b[0]*x*e/(q*q)
		return b[0] / q
	}},
	"Thurber.dat": {7, func(x float64, b, g []float64) float64 { // (b1 + b2x + b3x² + b4x³)/(1 + b5x + b6x² + b7x³)
		x2, x3 := x*x, x*x*x
		num := b[0] + b[1]*x + b[2]*x2 + b[3]*x3
		den := 1 + b[4]*x + b[5]*x2 + b[6]*x3
		f := num / den
		g[0], g[1], g[2], g[3] = 1/den, x/den, x2/den, x3/den
		g[4], g[5], g[6] = -f*x/den, -f*x2/den, -f*x3/den
		return f
	}},
	"Bennett5.dat": {3, func(x float64, b, g []float64) float64 { // b1·(b2 + x)^(−1/b3)
		q := b[1] + x
		v := math.Pow(q, -1/b[2])
		f := b[0] * v
		g[0], g[1], g[2] = v, -f/(b[2]*q), f*math.Log(q)/(b[2]*b[2])
		return f
	}},
}

// nistHard lists the file and start pairs where this solver, with the
// iteration cap below, ends with a typed outcome other than Converged, and
// which (it must never report Converged with wrong digits). Each entry was
// observed, not assumed; a change of outcome fails the test so that the
// list stays true.
var nistHard = map[string]Outcome{
	// From b = (2, 400000, 25000) Nielsen-damped steps creep along a curved
	// valley: 1,000 iterations end with IterationLimit (parameter LRE < 0);
	// TestNISTNonlinearMGH10Long shows the solution is reached with more.
	"MGH10.dat/start1": IterationLimit,
}

// TestNISTNonlinear solves every StRD nonlinear file in testdata from both
// certified starting points (NIST/ITL StRD, nonlinear regression; certified
// values parsed from each file) and reports the log relative error of each
// parameter, of its SD and of the residual SS. A Converged outcome must
// reach LRE ≥ 6 on every parameter and on the residual SS (NIST's
// yardstick, SOURCE.md); the SDs, which depend on the Jacobian at the
// solution, must reach LRE ≥ 4.
func TestNISTNonlinear(t *testing.T) {
	files := []string{"Misra1a.dat", "Chwirut2.dat", "DanWood.dat", "MGH10.dat", "Eckerle4.dat",
		"Rat42.dat", "Thurber.dat", "BoxBOD.dat", "Bennett5.dat"}
	for _, file := range files {
		runNISTNonlinear(t, file, [2]int{nistMaxIter, nistMaxIter})
	}
}

// runNISTNonlinear solves file from both starts with the given iteration
// caps and checks the result as TestNISTNonlinear says.
func runNISTNonlinear(t *testing.T, file string, maxIter [2]int) {
	runNISTNonlinearWith(t, file, nistModels[file], maxIter)
}

// runNISTNonlinearWith is runNISTNonlinear with the given curve.
func runNISTNonlinearWith(t *testing.T, file string, model Curve, maxIter [2]int) {
	{
		d := readNISTNonlinear(t, file)
		if model.NumParams() != len(d.params) {
			t.Fatalf("%s: model has %d parameters, file certifies %d", file, model.NumParams(), len(d.params))
		}
		for s := 0; s < 2; s++ {
			name := file + "/start" + strconv.Itoa(s+1)
			t.Run(name, func(t *testing.T) {
				res, err := SolveNLLS(model, d.x, d.y, nil, NLLSOptions{Start: d.starts[s], MaxIter: maxIter[s]})
				if err != nil {
					t.Fatal(err)
				}
				minP, minSD := 15.0, 15.0
				for j := range d.params {
					minP = math.Min(minP, lre(res.Params[j], d.params[j]))
					if res.StdErrors != nil {
						minSD = math.Min(minSD, lre(res.StdErrors[j], d.paramSDs[j]))
					}
				}
				lSS := lre(res.SSR, d.ssr)
				t.Logf("%s: %s (%s) after %d iterations; lowest parameter LRE %.1f, residual SS LRE %.1f, lowest SD LRE %.2f",
					name, res.Outcome, res.Criterion, res.Iterations, minP, lSS, minSD)
				if want, hard := nistHard[name]; hard && maxIter[s] == nistMaxIter || res.Outcome != Converged {
					if res.Outcome != want {
						t.Errorf("%s: outcome %s, expected %s", name, res.Outcome, want)
					}
					return
				}
				if res.DF != d.df {
					t.Errorf("df %d, NIST %d", res.DF, d.df)
				}
				if minP < 6 || lSS < 6 {
					t.Errorf("Converged but lowest parameter LRE %.1f, SS LRE %.1f (< 6): %v vs NIST %v", minP, lSS, res.Params, d.params)
				}
				if minSD < 4 || lre(res.ResidualSD, d.residSD) < 6 {
					t.Errorf("SD LRE %.1f (< 4) or residual SD LRE %.1f (< 6)", minSD, lre(res.ResidualSD, d.residSD))
				}
			})
		}
	}
}

// nistMaxIter is the iteration cap of TestNISTNonlinear.
const nistMaxIter = 1000

// TestNISTNonlinearMGH10Long solves MGH10 from start 1 with a cap of 10,000
// iterations (about 0.1 s), which must end Converged with LRE ≥ 6.
func TestNISTNonlinearMGH10Long(t *testing.T) {
	if testing.Short() {
		t.Skip("long iteration run; skipped with -short")
	}
	runNISTNonlinear(t, "MGH10.dat", [2]int{10000, nistMaxIter})
}

// TestNISTNonlinearCalibrationModels solves the StRD files whose models are
// calibration models with the package's own curves and Jacobians:
// Misra1a and BoxBOD with ExpSaturation, DanWood with Power (same checks
// and expected outcomes as TestNISTNonlinear).
func TestNISTNonlinearCalibrationModels(t *testing.T) {
	for file, m := range map[string]Model{"Misra1a.dat": ExpSaturation, "BoxBOD.dat": ExpSaturation, "DanWood.dat": Power} {
		runNISTNonlinearWith(t, file, curveOf(m), [2]int{nistMaxIter, nistMaxIter})
	}
}

// TestNISTBoxBODSecondTry: from BoxBOD's first start, b = (1, 1), the
// first run's steps raise b2 until exp(−b2·x) vanishes at every reading
// (x ≥ 1), the curve goes flat at b1 and the run ends Singular; the second
// try from the same start with heavy initial damping converges to the
// certified values (checked to LRE ≥ 6 by TestNISTNonlinear), and its
// criterion says that it was the second try.
func TestNISTBoxBODSecondTry(t *testing.T) {
	d := readNISTNonlinear(t, "BoxBOD.dat")
	res, err := SolveNLLS(nistModels["BoxBOD.dat"], d.x, d.y, nil, NLLSOptions{Start: d.starts[0], MaxIter: nistMaxIter})
	if err != nil {
		t.Fatal(err)
	}
	if res.Outcome != Converged || !strings.Contains(res.Criterion, "second try") || !strings.Contains(res.Criterion, "singular") {
		t.Errorf("outcome %s (%s)", res.Outcome, res.Criterion)
	}
	for j := range d.params {
		if l := lre(res.Params[j], d.params[j]); l < 6 {
			t.Errorf("b%d = %v, certified %v: LRE %.1f", j+1, res.Params[j], d.params[j], l)
		}
	}
}
