package main

import (
	"fmt"
	"math/rand/v2"
	"net/http"
	"strings"
	"time"

	"curvekeeper/lab"
)

// The LC-MS/MS part of the demo is invented as well: the Harrowgate
// Bioanalysis Lab (invented) quantifies two drug-like analytes in plasma
// extracts on an LC-MS/MS ("hgb-lcms-1"), each against its own
// isotope-labelled internal standard: analyte-T by a line weighted 1/x² on
// the response ratio, analyte-Q by the average response factor. Each batch
// is a sequence: seven calibration standards, a double blank after the
// highest one (the carry-over check), an ICV, a method blank, four samples,
// a mid-batch CCV, four samples and a closing CCV. In batch
// demoLCMSFailingBatch the mid-batch CCV of analyte-T recovers 122 %
// (outside 90–110 %), so the four samples since the ICV are withheld for
// analyte-T; after a rinse the re-injected CCV passes and opens the next
// bracket; in batch demoLCMSSuppressed one sample's internal standard is
// suppressed to about 40 % (outside 60–125 %) and withheld for it. Defects
// are placed by batch number, never by the day.
const (
	demoLCMSLab            = "Harrowgate Bioanalysis Lab (invented)"
	demoLCMS               = "hgb-lcms-1"
	demoLCMSMethod         = "harrowgate-tq-lcms"
	demoLCMSBatches        = 3
	demoLCMSFailingBatch   = 2 // the batch whose mid-batch CCV of analyte-T fails
	demoLCMSSuppressed     = 3 // the batch with an IS-suppressed sample
	demoLCMSSuppressedSmpl = 6 // that sample's number
	demoLCMSSeed           = 20261205
	demoLCMSCCVNominal     = 25.0
)

// demoLCMSLevels are the calibration standards (ng/mL).
var demoLCMSLevels = []float64{1, 2, 5, 10, 20, 50, 100}

// demoLCMSSamples are the true concentrations of a batch's eight samples.
var demoLCMSSamples = []float64{3, 8, 15, 25, 40, 60, 12, 80}

// demoLCMSAnalyte is an invented analyte: its internal standard, the model
// it is fitted with, and its true response ratio A_x/A_is at c ng/mL.
type demoLCMSAnalyte struct {
	name, is, model string
	ratio           func(c float64) float64
}

var demoLCMSAnalytes = []demoLCMSAnalyte{
	{"analyte-T", "analyte-T-d5", "", func(c float64) float64 { return 0.021*c + 0.0008 }},
	{"analyte-Q", "analyte-Q-13C6", "average_rf", func(c float64) float64 { return 0.0145 * c }},
}

// demoLCMSMethodBody is the method: both analytes with their internal
// standard, reporting limit at the lowest standard, blanks judged at 20 %
// of the LLOQ.
func demoLCMSMethodBody() map[string]any {
	var analytes []map[string]any
	for _, a := range demoLCMSAnalytes {
		m := map[string]any{"name": a.name, "unit": "ng/mL", "quant": map[string]any{
			"internal_standard": a.is, "reporting_limit": 1, "detection_limit": 0.3, "significant_figures": 3,
			"blank_limit_fraction_of_lloq": 0.2, "blank_subtraction": "none"}}
		if a.model != "" {
			m["model"] = a.model
		}
		analytes = append(analytes, m)
	}
	return map[string]any{"name": demoLCMSMethod, "model": "linear", "weighting": "1/x^2", "analytes": analytes,
		"description": "Invented LC-MS/MS method of the demo: internal standards, one analyte by the average response factor."}
}

// demoLCMSRuns builds the batches, one per day before end, oldest first;
// the values come from a fixed seed, only the dates move with end.
func demoLCMSRuns(end time.Time) []map[string]any {
	rng := rand.New(rand.NewPCG(demoLCMSSeed, 5))
	day := time.Date(end.UTC().Year(), end.UTC().Month(), end.UTC().Day(), 8, 0, 0, 0, time.UTC)
	noisy := func(v, rel float64) float64 { return round(v*(1+rel*rng.NormFloat64()), 5) }
	isResp := func() float64 { return round(50000*(1+0.03*rng.NormFloat64()), 0) }
	var runs []map[string]any
	for b := 1; b <= demoLCMSBatches; b++ {
		at := day.AddDate(0, 0, b-demoLCMSBatches-1)
		var standards, samples, injections []map[string]any
		pos := 0
		inj := func(kind, id string, extra map[string]any) {
			pos++
			m := map[string]any{"position": pos, "kind": kind, "id": id, "time": at.Add(time.Duration(pos-1) * 5 * time.Minute)}
			for k, v := range extra {
				m[k] = v
			}
			injections = append(injections, m)
		}
		for i, c := range demoLCMSLevels {
			lv := fmt.Sprintf("L%d", i+1)
			for _, a := range demoLCMSAnalytes {
				is := isResp()
				standards = append(standards, map[string]any{"analyte": a.name, "level": lv, "concentration": c,
					"responses": []float64{noisy(a.ratio(c)*is, 0.025)}, "is_responses": []float64{is}})
			}
			inj("calibration_standard", lv, nil)
		}
		// The double blank after the highest standard (no internal standard
		// added): its readings are the carry-over check; judged by the analyst.
		pos++
		for _, a := range demoLCMSAnalytes {
			injections = append(injections, map[string]any{"position": pos, "kind": "calibration_blank", "id": "DBL", "analyte": a.name,
				"time": at.Add(time.Duration(pos-1) * 5 * time.Minute), "judged": "pass",
				"responses": []float64{round(0.05*a.ratio(1)*50000, 1)}, "is_responses": []float64{round(400+50*rng.Float64(), 0)}})
		}
		check := func(kind, id string, failT bool) {
			pos++
			for _, a := range demoLCMSAnalytes {
				is := isResp()
				r := a.ratio(demoLCMSCCVNominal) * is
				if failT && a.name == "analyte-T" {
					r *= 1.22
				}
				m := map[string]any{"position": pos, "kind": kind, "id": id, "analyte": a.name,
					"time": at.Add(time.Duration(pos-1) * 5 * time.Minute), "responses": []float64{noisy(r, 0.01)}, "is_responses": []float64{is}}
				if kind != "method_blank" {
					m["nominal"] = demoLCMSCCVNominal
				} else {
					m["responses"] = []float64{round(0.02*a.ratio(1)*is, 1)} // about 2 % of the LLOQ
				}
				injections = append(injections, m)
			}
		}
		check("icv", "ICV", false)
		check("method_blank", "MB", false)
		for k, c := range demoLCMSSamples {
			id := fmt.Sprintf("HGB-B%d-S%d", b, k+1)
			if k == 4 {
				check("ccv", "CCV1", b == demoLCMSFailingBatch)
				if b == demoLCMSFailingBatch {
					// The analyst rinses with a solvent blank and re-injects
					// the CCV, which passes and opens a new bracket.
					pos++
					for _, a := range demoLCMSAnalytes {
						injections = append(injections, map[string]any{"position": pos, "kind": "calibration_blank", "id": "RINSE",
							"analyte": a.name, "judged": "pass", "time": at.Add(time.Duration(pos-1) * 5 * time.Minute)})
					}
					check("ccv", "CCV1-R", false)
				}
			}
			for _, a := range demoLCMSAnalytes {
				is := isResp()
				if b == demoLCMSSuppressed && k+1 == demoLCMSSuppressedSmpl {
					is = round(is*0.4, 0) // ion suppression by the sample's matrix
				}
				samples = append(samples, map[string]any{"id": id, "analyte": a.name,
					"responses": []float64{noisy(a.ratio(c)*is, 0.02)}, "is_responses": []float64{is}})
			}
			inj("sample", id, nil)
		}
		check("ccv", "CCV2", false)
		runs = append(runs, map[string]any{"method": demoLCMSMethod, "instrument": demoLCMS, "acquired_at": at,
			"operator": "analyst-9", "standards": standards, "samples": samples,
			"sequence": map[string]any{"complete": true, "injections": injections}})
	}
	return runs
}

// demoLCMSPicks are the LC-MS/MS curves the demo points to.
type demoLCMSPicks struct {
	failingT, failingQ, failingRun string
	loaded                         int
}

// loadLCMSDemo defines the method and loads the batches once (a second
// demo finds them and adds none), then finds the failing batch's curves.
func loadLCMSDemo(d *demoClient, tokens map[string]string, now func() time.Time) (demoLCMSPicks, error) {
	var p demoLCMSPicks
	if err := d.do(tokens[lab.ScopeAdmin], http.MethodPost, "/v1/methods", demoLCMSMethodBody(), nil); err != nil {
		return p, err
	}
	type curve struct {
		ID      string `json:"id"`
		RunID   string `json:"run_id"`
		Analyte string `json:"analyte"`
	}
	var existing struct {
		Curves []curve `json:"curves"`
	}
	loaded, err := demoLoadOnce(d, tokens, demoLCMS, "demo-lcms-run", "demo LC-MS/MS batch", func() []map[string]any { return demoLCMSRuns(now()) },
		&existing, func() bool { return len(existing.Curves) == 0 })
	if err != nil {
		return p, err
	}
	p.loaded = loaded
	// Curves are listed newest first, one per analyte and batch.
	per := map[string][]curve{}
	for _, c := range existing.Curves {
		per[c.Analyte] = append(per[c.Analyte], c)
	}
	if cs := per["analyte-T"]; len(cs) >= demoLCMSBatches {
		c := cs[demoLCMSBatches-demoLCMSFailingBatch]
		p.failingT, p.failingRun = c.ID, c.RunID
	}
	if cs := per["analyte-Q"]; len(cs) >= demoLCMSBatches {
		p.failingQ = cs[demoLCMSBatches-demoLCMSFailingBatch].ID
	}
	return p, nil
}

// print writes the LC-MS/MS part of the demo's walkthrough.
func (p demoLCMSPicks) print(w *strings.Builder, base string) {
	fmt.Fprintf(w, "\nLC-MS/MS: %s, instrument %s, method %s (internal standards; analyte-T by a line 1/x², analyte-Q by the average response factor).\n",
		demoLCMSLab, demoLCMS, demoLCMSMethod)
	if p.loaded > 0 {
		fmt.Fprintf(w, "Loaded %d batches, each a sequence.\n", p.loaded)
	}
	fmt.Fprintf(w, "  analyte-T of the batch whose mid-batch CCV fails: %s\n", orNone(p.failingT))
	fmt.Fprintf(w, "  analyte-Q of the same batch (average RF):        %s\n", orNone(p.failingQ))
	if p.failingT != "" {
		fmt.Fprintf(w, "  %s/ui/curves/%s#sequence-h     # the sequence in injection order, each sample's bracket\n", base, p.failingT)
		fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $LIMS\" %s/v1/runs/%s/results     # withheld samples, reported values\n", base, p.failingRun)
		fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $LIMS\" %s/v1/curves/%s     # response_factors, check rf_rsd\n", base, p.failingQ)
	}
}

// demoLoadOnce posts runs (keys keyPrefix-00, -01, …) unless the instrument
// has curves already, and leaves the instrument's newest curves (GET
// /v1/curves, 20 at most) in listed; none reports whether listed holds
// none. It returns how many runs it posted.
func demoLoadOnce[R any](d *demoClient, tokens map[string]string, instrument, keyPrefix, what string, runs func() []R, listed any, none func() bool) (int, error) {
	list := func() error {
		return d.do(tokens[lab.ScopeResultsRead], http.MethodGet, "/v1/curves?instrument="+instrument+"&limit=20", nil, listed)
	}
	if err := list(); err != nil || !none() {
		return 0, err
	}
	loaded := 0
	for i, r := range runs() {
		if err := d.doKey(tokens[lab.ScopeRunsWrite], fmt.Sprintf("%s-%02d", keyPrefix, i), "/v1/runs", r, nil); err != nil {
			return loaded, fmt.Errorf("%s %d: %w", what, i+1, err)
		}
		loaded++
	}
	return loaded, list()
}
