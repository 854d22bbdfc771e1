package main

import (
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"time"
)

// The demo scenario is invented: the Tarnwick Water Laboratory, a small
// drinking-water lab with two instruments, an ICP-MS ("tarn-icpms-1") for
// lead and arsenic and a UV-Vis photometer ("tarn-uvvis-2") for nitrate.
// Four weeks of runs, generated from fixed seeds so every load is the same
// whatever the day (only the dates move with the clock):
//   - the ICP-MS loses sensitivity slowly (its lead slope falls about 0.5 %
//     a working day), which the trend of its slopes shows;
//   - one nitrate run saturates at the top of its range (a curve that fails
//     the linearity checks);
//   - one arsenic run has a mis-pipetted standard (a bad standard, an outlier).
const (
	demoLab        = "Tarnwick Water Laboratory (invented)"
	demoICPMS      = "tarn-icpms-1"
	demoUVVis      = "tarn-uvvis-2"
	demoMetals     = "tarnwick-metals-icpms"
	demoNitrate    = "tarnwick-nitrate-uv"
	demoDays       = 28 // four weeks: always twenty working days, whatever the weekday
	demoBadICPRun  = 7  // arsenic: one mis-pipetted standard in the 7th ICP-MS run (of 20)
	demoCurvedUV   = 7  // nitrate: detector saturation in the 7th UV-Vis run (of 10)
	demoSampleRuns = 3  // samples are posted with the newest runs
	// demoSeed seeds the scenario's noise. It is chosen so that the planned
	// defects are the only failing curves: with 20261201 one ordinary arsenic
	// curve failed Mandel's test by chance (at α = 0.01, about one curve in a
	// hundred does).
	demoSeed = 20261202

	demoNoteBadStandard = "arsenic standard As-5 mis-pipetted (a bad standard)"
	demoNoteSaturates   = "nitrate response saturates at the top levels (fails linearity)"
)

type demoMethod struct {
	Name      string        `json:"name"`
	Model     string        `json:"model"`
	Weighting string        `json:"weighting"`
	Analytes  []demoAnalyte `json:"analytes"`
}

type demoAnalyte struct {
	Name string `json:"name"`
	Unit string `json:"unit"`
	// Uncertainty is the analyte's budget and conformity rule (demo_uncert.go).
	Uncertainty map[string]any `json:"uncertainty,omitempty"`
}

type demoStandard struct {
	Analyte       string    `json:"analyte"`
	Level         string    `json:"level"`
	Concentration float64   `json:"concentration"`
	Responses     []float64 `json:"responses"`
}

type demoSample struct {
	ID        string    `json:"id"`
	Analyte   string    `json:"analyte"`
	Responses []float64 `json:"responses"`
	Dilution  float64   `json:"dilution,omitempty"`
}

type demoRun struct {
	Method     string         `json:"method"`
	Instrument string         `json:"instrument"`
	AcquiredAt time.Time      `json:"acquired_at"`
	Operator   string         `json:"operator,omitempty"`
	Standards  []demoStandard `json:"standards"`
	Samples    []demoSample   `json:"samples,omitempty"`
	// StandardMaterials: the stocks the standards were made from (demo_uncert.go).
	StandardMaterials []string `json:"standard_materials,omitempty"`
	Note              string   `json:"-"` // what is special about this run
}

var demoMethods = []demoMethod{
	{Name: demoMetals, Model: "linear", Weighting: "1/x^2",
		Analytes: []demoAnalyte{{Name: "Pb", Unit: "ug/L"}, {Name: "As", Unit: "ug/L"}}},
	{Name: demoNitrate, Model: "linear", Weighting: "auto",
		Analytes: []demoAnalyte{{Name: "NO3-N", Unit: "mg/L", Uncertainty: demoNitrateUncertainty}}},
}

// demoLevels are the nominal concentrations of each analyte's standards.
var demoLevels = map[string][]float64{
	"Pb":    {0.5, 1, 2, 5, 10, 20, 40, 50},
	"As":    {0.5, 1, 2, 5, 10, 20, 40, 50},
	"NO3-N": {0.2, 0.5, 1, 2, 4, 6, 8, 10},
}

// demoRuns builds the scenario's runs, oldest first: one ICP-MS run on each
// working day (Monday to Friday, UTC) of the demoDays days before end's UTC
// date, and a UV-Vis run on every other one. Four weeks always hold twenty
// working days and the random numbers are drawn in the same order, so the
// runs, their defects and their values are the same whatever end is; the
// defects are placed by run number, never by date.
func demoRuns(end time.Time) []demoRun {
	rng := rand.New(rand.NewPCG(demoSeed, 7))
	end = end.UTC()
	start := time.Date(end.Year(), end.Month(), end.Day(), 0, 0, 0, 0, time.UTC).AddDate(0, 0, -demoDays)
	var runs []demoRun
	workday, uvRuns := 0, 0
	for day := 0; day < demoDays; day++ {
		date := start.AddDate(0, 0, day)
		if wd := date.Weekday(); wd == time.Saturday || wd == time.Sunday {
			continue
		}
		workday++
		// ICP-MS, every working day at 08:10: lead and arsenic.
		drift := math.Pow(0.995, float64(workday)) // slow sensitivity loss
		icp := demoRun{Method: demoMetals, Instrument: demoICPMS, AcquiredAt: date.Add(8*time.Hour + 10*time.Minute),
			Operator: "analyst-a"}
		icp.Standards = append(icp.Standards, demoCurve(rng, "Pb", 120+3*rng.Float64(), 1850*drift, 0.02, 2, 0)...)
		as := demoCurve(rng, "As", 60+2*rng.Float64(), 920*math.Pow(0.999, float64(workday)), 0.025, 2, 0)
		if workday == demoBadICPRun {
			// One standard mis-pipetted: level As-5 read as if it held 1.5× its nominal.
			for i := range as[4].Responses {
				as[4].Responses[i] *= 1.5
			}
			icp.Note = demoNoteBadStandard
		}
		icp.Standards = append(icp.Standards, as...)
		runs = append(runs, icp)
		// UV-Vis, every other working day at 09:30: nitrate.
		if workday%2 == 1 {
			uvRuns++
			curv := 0.0
			note := ""
			if uvRuns == demoCurvedUV {
				curv = -0.0045 // the detector saturates: the response bends over at the top
				note = demoNoteSaturates
			}
			uv := demoRun{Method: demoNitrate, Instrument: demoUVVis, AcquiredAt: date.Add(9*time.Hour + 30*time.Minute),
				Operator: "analyst-b", Note: note}
			uv.Standards = demoCurve(rng, "NO3-N", 0.004, 0.0815, 0.012, 3, curv)
			runs = append(runs, uv)
		}
	}
	// Samples with the newest runs of each instrument.
	seen := map[string]int{}
	for i := len(runs) - 1; i >= 0; i-- {
		r := &runs[i]
		if seen[r.Instrument] >= demoSampleRuns {
			continue
		}
		seen[r.Instrument]++
		r.Samples = demoSamples(rng, r)
	}
	return runs
}

// demoCurve makes one analyte's standards: response = b0 + b1·x·(1 + curv·x)
// with a relative noise of rsd, reps replicates per level.
func demoCurve(rng *rand.Rand, analyte string, b0, b1, rsd float64, reps int, curv float64) []demoStandard {
	var out []demoStandard
	for i, x := range demoLevels[analyte] {
		st := demoStandard{Analyte: analyte, Level: fmt.Sprintf("%s-%d", analyte, i+1), Concentration: x}
		for r := 0; r < reps; r++ {
			y := b0 + b1*x*(1+curv*x*x)
			y *= 1 + rsd*rng.NormFloat64()
			st.Responses = append(st.Responses, round(y, 5))
		}
		out = append(out, st)
	}
	return out
}

// demoSamples invents a few tap-water samples for a run, with a sample above
// the range (diluted) and one near the blank.
func demoSamples(rng *rand.Rand, r *demoRun) []demoSample {
	day := r.AcquiredAt.Format("20060102")
	var out []demoSample
	for _, st := range r.Standards {
		if st.Level[len(st.Level)-1] != '1' || len(st.Level) < 2 || st.Level[len(st.Level)-2] != '-' {
			continue // one set of samples per analyte, keyed off its first level
		}
		lowest, highest := st.Concentration, demoLevels[st.Analyte][len(demoLevels[st.Analyte])-1]
		resp := func(x float64) float64 {
			// read off this run's own standards by linear interpolation
			return interpolate(r.Standards, st.Analyte, x) * (1 + 0.01*rng.NormFloat64())
		}
		for k, x := range []float64{0.3 * highest, 0.6 * highest, lowest * 0.4, highest * 1.3} {
			s := demoSample{ID: fmt.Sprintf("TW-%s-%s-%d", day, st.Analyte, k+1), Analyte: st.Analyte,
				Responses: []float64{round(resp(x), 5), round(resp(x), 5)}}
			if k == 3 {
				s.ID += "-dil"
				s.Dilution = 1 // posted undiluted on purpose: the result is flagged as extrapolated
			}
			out = append(out, s)
		}
	}
	return out
}

func interpolate(stds []demoStandard, analyte string, x float64) float64 {
	var xs, ys []float64
	for _, s := range stds {
		if s.Analyte != analyte {
			continue
		}
		m := 0.0
		for _, y := range s.Responses {
			m += y
		}
		xs, ys = append(xs, s.Concentration), append(ys, m/float64(len(s.Responses)))
	}
	if x <= xs[0] {
		return ys[0] + (x-xs[0])*(ys[1]-ys[0])/(xs[1]-xs[0])
	}
	for i := 1; i < len(xs); i++ {
		if x <= xs[i] {
			return ys[i-1] + (x-xs[i-1])*(ys[i]-ys[i-1])/(xs[i]-xs[i-1])
		}
	}
	n := len(xs) - 1
	return ys[n] + (x-xs[n])*(ys[n]-ys[n-1])/(xs[n]-xs[n-1])
}

func round(v float64, digits int) float64 {
	p := math.Pow(10, float64(digits))
	return math.Round(v*p) / p
}

// demoMidResponse is the mean response of the fourth standard of analyte in
// run r: a reading inside the working range, for the printed example.
func demoMidResponse(r demoRun, analyte string) float64 {
	for _, s := range r.Standards {
		if s.Analyte == analyte && strings.HasSuffix(s.Level, "-4") {
			m := 0.0
			for _, y := range s.Responses {
				m += y
			}
			return round(m/float64(len(s.Responses)), 3)
		}
	}
	return 0
}
