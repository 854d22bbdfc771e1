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

// nistData is one NIST StRD linear least-squares dataset with the certified
// values parsed from its own header (never retyped).
type nistData struct {
	names     []string  // "B0", "B1", ... as the header names them
	params    []float64 // certified estimates
	paramSDs  []float64
	residSD   float64
	rSquared  float64
	x, y      []float64
	nObserved int
}

var (
	reDataLines = regexp.MustCompile(`Data\s+\(lines\s+(\d+)\s+to\s+(\d+)\)`)
	reParam     = regexp.MustCompile(`^\s*B(\d+)\s+(\S+)\s+(\S+)\s*$`)
	reResidSD   = regexp.MustCompile(`^\s*Standard Deviation\s+([-+0-9.Ee]+)\s*$`)
	reRSquared  = regexp.MustCompile(`^\s*R-Squared\s+([-+0-9.Ee]+)\s*$`)
	reNObs      = regexp.MustCompile(`^\s*(\d+)\s+Observations`)
)

// readNIST parses a StRD .dat file (CRLF, header lines 1–60, data lines as
// the header's "Data (lines a to b)" says; column 1 y, column 2 x).
func readNIST(t *testing.T, name string) nistData {
	t.Helper()
	raw, err := os.ReadFile(filepath.Join("..", "testdata", "nist", name))
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.ReplaceAll(string(raw), "\r\n", "\n"), "\n")
	var d nistData
	first, last := 0, 0
	for i, ln := range lines {
		if i >= 60 {
			break
		}
		if m := reDataLines.FindStringSubmatch(ln); m != nil && first == 0 {
			first, _ = strconv.Atoi(m[1])
			last, _ = strconv.Atoi(m[2])
		}
		if m := reParam.FindStringSubmatch(ln); m != nil {
			d.names = append(d.names, "B"+m[1])
			d.params = append(d.params, mustFloat(t, m[2]))
			d.paramSDs = append(d.paramSDs, mustFloat(t, m[3]))
		}
		if m := reResidSD.FindStringSubmatch(ln); m != nil {
			d.residSD = mustFloat(t, m[1])
		}
		if m := reRSquared.FindStringSubmatch(ln); m != nil {
			d.rSquared = mustFloat(t, m[1])
		}
		if m := reNObs.FindStringSubmatch(ln); m != nil {
			d.nObserved, _ = strconv.Atoi(m[1])
		}
	}
	if first == 0 || len(d.params) == 0 || d.residSD == 0 || d.rSquared == 0 {
		t.Fatalf("%s: header not parsed (data %d–%d, %d params, sd %v, R² %v)", name, first, last, len(d.params), d.residSD, d.rSquared)
	}
	for i := first - 1; i < last; i++ {
		f := strings.Fields(lines[i])
		if len(f) != 2 {
			t.Fatalf("%s line %d: %q", name, i+1, lines[i])
		}
		d.y = append(d.y, mustFloat(t, f[0]))
		d.x = append(d.x, mustFloat(t, f[1]))
	}
	if len(d.x) != d.nObserved {
		t.Fatalf("%s: %d data rows, header says %d observations", name, len(d.x), d.nObserved)
	}
	return d
}

func mustFloat(t *testing.T, s string) float64 {
	t.Helper()
	v, err := strconv.ParseFloat(s, 64)
	if err != nil {
		t.Fatalf("parse %q: %v", s, err)
	}
	return v
}

// lre is the log relative error −log10(|got − want|/|want|), capped at 15
// (NIST's measure of agreement in significant digits).
func lre(got, want float64) float64 {
	if got == want {
		return 15
	}
	if want == 0 {
		return -math.Log10(math.Abs(got))
	}
	return math.Min(15, -math.Log10(math.Abs(got-want)/math.Abs(want)))
}

// TestNIST checks Fit against the NIST StRD certified values (NIST/ITL
// Statistical Reference Datasets, linear least squares; testdata/nist,
// SOURCE.md): every coefficient, its SD, the residual SD and R² must agree
// to a log relative error ≥ 12.
func TestNIST(t *testing.T) {
	const minLRE = 12
	tests := []struct {
		file  string
		model Model
	}{
		{"Norris.dat", Linear},
		{"Pontius.dat", Quadratic},
		{"NoInt2.dat", LinearOrigin},
	}
	for _, tc := range tests {
		t.Run(tc.file, func(t *testing.T) {
			d := readNIST(t, tc.file)
			pts := make([]Point, len(d.x))
			for i := range d.x {
				pts[i] = Point{X: d.x[i], Y: d.y[i]}
			}
			rep, err := Fit(pts, Options{Model: tc.model, Weighting: WeightNone})
			if err != nil {
				t.Fatal(err)
			}
			if got, want := len(rep.Coefficients), len(d.params); got != want {
				t.Fatalf("got %d coefficients, NIST certifies %d", got, want)
			}
			check := func(what string, got, want float64) {
				t.Helper()
				if l := lre(got, want); l < minLRE {
					t.Errorf("%s: got %.15g, NIST certified %.15g, LRE %.1f < %d", what, got, want, l, minLRE)
				} else {
					t.Logf("%s: LRE %.1f", what, l)
				}
			}
			for j := range d.params {
				check(d.names[j]+" estimate", rep.Coefficients[j], d.params[j])
				check(d.names[j]+" SD", rep.StandardErrors[j], d.paramSDs[j])
			}
			check("residual SD", rep.ResidualSD, d.residSD)
			check("R-squared", rep.RSquared, d.rSquared)
		})
	}
}
