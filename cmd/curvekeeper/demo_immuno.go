package main

import (
	"fmt"
	"math"
	"math/rand/v2"
	"net/http"
	"strings"
	"time"

	"curvekeeper/lab"
)

// The immunoassay part of the demo is invented too: the Brackenfield
// Immunology Unit (invented) reads sandwich immunoassay plates for a
// cytokine-like marker ("marker-K", pg/mL) on a plate reader
// ("brk-plate-1"), calibrated with a four-parameter logistic weighted by a
// power of the mean (θ estimated from the duplicate wells). Each plate has
// eight calibrators in duplicate and two anchor calibrators outside the
// range (fitted, not judged). Plate 3's reader saturates: its top wells
// read at the reader's ceiling, the curve flattens, C7 back-calculates far
// off (one level, which ICH M10's 75 % rule still allows) and the precision
// profile ends the working range below the top calibrator.
const (
	demoImmunoLab    = "Brackenfield Immunology Unit (invented)"
	demoPlateReader  = "brk-plate-1"
	demoImmunoMethod = "brackenfield-marker-k-4pl"
	demoImmunoPlates = 5
	demoSaturated    = 3 // the plate whose top calibrator saturates
	demoReaderMax    = 1.95
	demoImmunoSeed   = 20261204
)

// demoImmunoLevels are the calibrators (pg/mL): a two-fold series with an
// anchor below and above.
var demoImmunoLevels = []struct {
	label string
	x     float64
}{
	{"anchor-low", 1.5}, {"C1", 3.9}, {"C2", 7.8}, {"C3", 15.6}, {"C4", 31.25}, {"C5", 62.5},
	{"C6", 125}, {"C7", 250}, {"C8", 500}, {"anchor-high", 1500},
}

// demoImmunoTrue is the invented 4PL [a, b, c, d] the readings scatter
// around: y = d + (a − d)/(1 + (x/c)^b).
var demoImmunoTrue = [4]float64{0.045, 1.15, 180, 3.1}

func demoImmunoResponse(x float64) float64 {
	a, b, c, d := demoImmunoTrue[0], demoImmunoTrue[1], demoImmunoTrue[2], demoImmunoTrue[3]
	return d + (a-d)/(1+math.Pow(x/c, b))
}

// demoImmunoRuns builds the plates, one per day before end, oldest first;
// the values come from a fixed seed, only the dates move with end.
func demoImmunoRuns(end time.Time) []demoRun {
	rng := rand.New(rand.NewPCG(demoImmunoSeed, 11))
	day := time.Date(end.UTC().Year(), end.UTC().Month(), end.UTC().Day(), 10, 30, 0, 0, time.UTC)
	runs := make([]demoRun, 0, demoImmunoPlates)
	for p := 1; p <= demoImmunoPlates; p++ {
		r := demoRun{Method: demoImmunoMethod, Instrument: demoPlateReader, Operator: "analyst-7",
			AcquiredAt: day.AddDate(0, 0, p-demoImmunoPlates-1)}
		for _, l := range demoImmunoLevels {
			mu := demoImmunoResponse(l.x)
			resp := make([]float64, 2) // duplicate wells
			for k := range resp {
				y := mu * (1 + 0.035*rng.NormFloat64())
				if p == demoSaturated {
					y = math.Min(y, demoReaderMax)
				}
				resp[k] = round(y, 4)
			}
			r.Standards = append(r.Standards, demoStandard{Analyte: "marker-K", Level: l.label, Concentration: l.x, Responses: resp})
		}
		for s, x := range []float64{12, 90, 320} {
			mu := demoImmunoResponse(x)
			r.Samples = append(r.Samples, demoSample{ID: fmt.Sprintf("BRK-P%d-S%d", p, s+1), Analyte: "marker-K",
				Responses: []float64{round(mu*(1+0.035*rng.NormFloat64()), 4), round(mu*(1+0.035*rng.NormFloat64()), 4)}})
		}
		if p == demoSaturated {
			r.Note = "the reader saturates at the top calibrator (C8 and the high anchor read at its ceiling)"
		}
		runs = append(runs, r)
	}
	return runs
}

// demoImmunoUncertainty is marker-K's budget: the calibration term alone
// (it already holds the wells' scatter through s²/m), bottom-up, with Monte
// Carlo run by itself (the default `auto`) where the GUM linearisation is in
// doubt, as towards the upper asymptote.
var demoImmunoUncertainty = map[string]any{"terms": []string{lab.TermCalibration}}

// demoImmunoPicks are the immunoassay curves the demo points to.
type demoImmunoPicks struct {
	good, saturated string
	loaded          int
}

// loadImmunoDemo defines the 4PL method and loads the plates once (a
// second demo finds them and adds none), then finds a passing plate and the
// saturated one through the API.
func loadImmunoDemo(d *demoClient, tokens map[string]string, now func() time.Time) (demoImmunoPicks, error) {
	var p demoImmunoPicks
	m := demoMethod{Name: demoImmunoMethod, Model: "4pl", Weighting: "power_of_mean",
		Analytes: []demoAnalyte{{Name: "marker-K", Unit: "pg/mL", Uncertainty: demoImmunoUncertainty}}}
	if err := d.do(tokens[lab.ScopeAdmin], http.MethodPost, "/v1/methods", m, nil); err != nil {
		return p, err
	}
	type curve struct {
		ID string `json:"id"`
	}
	var existing struct {
		Curves []curve `json:"curves"`
	}
	loaded, err := demoLoadOnce(d, tokens, demoPlateReader, "demo-immuno-run", "demo plate", func() []demoRun { return demoImmunoRuns(now()) },
		&existing, func() bool { return len(existing.Curves) == 0 })
	if err != nil {
		return p, err
	}
	p.loaded = loaded
	// Curves are listed newest first; the saturated plate is number
	// demoSaturated of demoImmunoPlates.
	if n := len(existing.Curves); n >= demoImmunoPlates {
		p.good = existing.Curves[0].ID
		p.saturated = existing.Curves[demoImmunoPlates-demoSaturated].ID
	}
	return p, nil
}

// print writes the immunoassay part of the demo's walkthrough.
func (p demoImmunoPicks) print(w *strings.Builder, base string) {
	fmt.Fprintf(w, "\nImmunoassay: %s, plate reader %s, method %s (4PL, power-of-the-mean weights).\n",
		demoImmunoLab, demoPlateReader, demoImmunoMethod)
	if p.loaded > 0 {
		fmt.Fprintf(w, "Loaded %d plates.\n", p.loaded)
	}
	fmt.Fprintf(w, "  marker-K plate that passes:                %s\n", orNone(p.good))
	fmt.Fprintf(w, "  marker-K plate whose top calibrator saturates (read its precision_profile check): %s\n", orNone(p.saturated))
	if p.good != "" {
		fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $LIMS\" %s/v1/curves/%s     # parameters a, b, c, d, θ, precision profile\n", base, p.good)
		fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $LIMS\" %s/v1/curves/%s/plot.svg -o plate.svg   # log-x axis\n", base, p.good)
		fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $LIMS\" -H 'Content-Type: application/json' \\\n"+
			"       -d '{\"samples\":[{\"id\":\"BRK-new-1\",\"responses\":[%.4g,%.4g]}]}' %s/v1/curves/%s/predictions\n",
			demoImmunoResponse(60), demoImmunoResponse(60)*1.02, base, p.good)
		fmt.Fprintf(w, "  # towards the upper asymptote the GUM's symmetric U misses the skew: Monte Carlo runs by itself and its interval is reported\n")
		fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $LIMS\" -H 'Content-Type: application/json' \\\n"+
			"       -d '{\"samples\":[{\"id\":\"BRK-new-2\",\"responses\":[2.3,2.346]}]}' %s/v1/curves/%s/predictions\n", base, p.good)
	}
}
